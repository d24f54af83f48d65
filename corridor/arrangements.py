"""Tower and conductor arrangements: named geometries of phase conductors and earth wires.

An arrangements file (TOML; the shipped examples are package data) defines each
arrangement once; :mod:`corridor.config` loads the one a run names and power
lines refer to an arrangement by name.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

from corridor.errors import ConfigError
from corridor.toml_read import read_toml, section_table

__all__ = ["PACKAGED_ARRANGEMENTS", "Arrangement", "Conductor", "load_arrangements"]

#: The example tower arrangements shipped with corridor (package data).
PACKAGED_ARRANGEMENTS = Path(__file__).resolve().parent / "data" / "arrangements.toml"


@dataclass(frozen=True)
class Conductor:
    """One conductor of a tower arrangement, positions relative to the centreline."""

    x_m: float
    height_m: float
    radius_m: float
    gmr_m: float
    resistance_ohm_per_km: float
    circuit: int  # -1 for an earth wire
    phase: str  # 'A', 'B', 'C'; '' for an earth wire
    material: str = "acsr"


@dataclass(frozen=True)
class Arrangement:
    """A named tower and conductor arrangement."""

    name: str
    description: str
    conductors: tuple[Conductor, ...]

    @property
    def n_circuits(self) -> int:
        return 1 + max(c.circuit for c in self.conductors)


def _conductor(raw: dict, where: str, problems: list[str], circuit: int, phase: str,
               index: int) -> Conductor | None:
    def pick(key, default=None, *, plural=None):
        value = raw.get(key, default)
        if isinstance(value, list):
            if index >= len(value):
                problems.append(f"{where}.{key}: list is too short")
                return math.nan
            value = value[index]
        if value is None or isinstance(value, bool) or not isinstance(value, int | float):
            problems.append(f"{where}.{key}: expected a number")
            return math.nan
        if not math.isfinite(value):
            problems.append(f"{where}.{key}: expected a finite number, got {value!r}")
            return math.nan
        return float(value)

    x = pick("x_m")
    h = pick("height_m")
    r = pick("radius_m")
    # a solid round conductor's GMR is r e^(-1/4) = 0.7788 r (textbook closed form)
    gmr = pick("gmr_m") if "gmr_m" in raw else r * 0.7788
    res = pick("resistance_ohm_per_km")
    for name, value in (("height_m", h), ("radius_m", r), ("gmr_m", gmr),
                        ("resistance_ohm_per_km", res)):
        if not math.isnan(value) and value <= 0:
            problems.append(f"{where}.{name}: must be positive, got {value}")
    return Conductor(x, h, r, gmr, res, circuit, phase, str(raw.get("material", "acsr")))


CIRCUIT_KEYS = {"phasing", "x_m", "height_m", "radius_m", "gmr_m", "resistance_ohm_per_km",
                "material"}
EARTH_WIRE_KEYS = {"x_m", "height_m", "radius_m", "gmr_m", "resistance_ohm_per_km", "material"}


def load_arrangements(path: Path) -> dict[str, Arrangement]:
    """Load and validate a tower-arrangement file.

    Each entry ``[arrangements.NAME]`` has a ``description``, one or more
    ``[[arrangements.NAME.circuits]]`` (``phasing`` such as ``"ABC"``, and
    three-element lists ``x_m``, ``height_m`` plus conductor data) and zero or
    more ``[[arrangements.NAME.earth_wires]]``.
    """
    problems: list[str] = []
    raw = read_toml(path, "arrangements file")
    out: dict[str, Arrangement] = {}
    for key in raw:
        if key != "arrangements":
            problems.append(f"{path.name}: {key}: unknown key (expected [arrangements.NAME])")
    for name, entry in section_table(raw, "arrangements", f"{path.name}: arrangements",
                              problems).items():
        where = f"{path.name}: arrangements.{name}"
        if not isinstance(entry, dict):
            problems.append(f"{where}: expected a table")
            continue
        for key in entry:
            if key not in {"description", "circuits", "earth_wires"}:
                problems.append(f"{where}.{key}: unknown key")
        conductors: list[Conductor] = []
        circuits = entry.get("circuits", [])
        if not isinstance(circuits, list):
            problems.append(f"{where}.circuits: expected [[...circuits]] tables")
            circuits = []
        elif not circuits:
            problems.append(f"{where}.circuits: at least one circuit is required")
        wires = entry.get("earth_wires", [])
        if not isinstance(wires, list):
            problems.append(f"{where}.earth_wires: expected [[...earth_wires]] tables")
            wires = []
        for ci, circ in enumerate(circuits):
            cw = f"{where}.circuits[{ci}]"
            if not isinstance(circ, dict):
                problems.append(f"{cw}: expected a table")
                continue
            for key in circ:
                if key not in CIRCUIT_KEYS:
                    problems.append(f"{cw}.{key}: unknown key")
            phasing = circ.get("phasing", "ABC")
            if not isinstance(phasing, str) or sorted(phasing) != ["A", "B", "C"]:
                problems.append(f"{cw}.phasing: expected a permutation of 'ABC', got {phasing!r}")
                phasing = "ABC"
            for k in ("x_m", "height_m"):
                if not (isinstance(circ.get(k), list) and len(circ[k]) == 3):
                    problems.append(f"{cw}.{k}: expected a list of three numbers")
            if any(p.startswith(cw) for p in problems):
                continue
            for j in range(3):
                c = _conductor(circ, cw, problems, ci, phasing[j], j)
                if c is not None:
                    conductors.append(c)
        for wi, wire in enumerate(wires):
            ww = f"{where}.earth_wires[{wi}]"
            if not isinstance(wire, dict):
                problems.append(f"{ww}: expected a table")
                continue
            for key in wire:
                if key not in EARTH_WIRE_KEYS:
                    problems.append(f"{ww}.{key}: unknown key")
            c = _conductor(wire, ww, problems, -1, "", 0)
            if c is not None:
                conductors.append(c)
        out[name] = Arrangement(name, str(entry.get("description", "")), tuple(conductors))
    if problems:
        raise ConfigError(problems)
    return out
