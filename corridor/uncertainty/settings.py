"""The ``[uncertainty]`` section of a run configuration: ranges of the uncertain inputs.

A run without the section is unchanged. With it, every per-asset run also computes an
ensemble of members (:mod:`corridor.uncertainty.ensemble`) over the inputs given a
range here (docs/methods.md §16)::

    [uncertainty]
    members = 32          # ensemble size
    seed = 2026           # Latin hypercube seed: the same seed gives the same bands
    soil_resistivity_factor = { low = 0.5, high = 2.0, distribution = "log-uniform" }
    coating_resistance_factor = { low = 0.3, high = 3.0, distribution = "log-uniform" }
    post_resistance_factor = { low = 0.5, high = 2.0, distribution = "log-uniform" }
    ground_resistance_factor = { low = 0.5, high = 2.0, distribution = "log-uniform" }
    load_current_factor = { low = 0.8, high = 1.2 }        # uniform when not given
    fault_current_factor = { low = 0.9, high = 1.1 }

    [uncertainty.soil_resistivity_ohm_m]   # per soil polygon, by its feature id
    "fid:3" = { low = 400.0, high = 2500.0, distribution = "log-uniform" }

Every range is optional. This module imports nothing from corridor, so
:mod:`corridor.config` may import it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

__all__ = ["DISTRIBUTIONS", "FACTORS", "Bands", "Range", "parse_uncertainty"]

#: Distributions a range may take between its low and high value.
DISTRIBUTIONS = ("uniform", "log-uniform")

#: Factor ranges: key -> what the factor multiplies (for messages and the docs).
FACTORS: dict[str, str] = {
    "soil_resistivity_factor": "every soil resistivity (layers and local value, and"
                               " run.default_soil_resistivity_ohm_m) outside the polygons"
                               " given a range of their own",
    "coating_resistance_factor": "coating_resistance_ohm_m2 of every coated asset",
    "post_resistance_factor": "post_resistance_ohm of every fence that gives one",
    "ground_resistance_factor": "resistance_ohm of every ground item and"
                                " termination_resistance_ohm of every grounded end",
    "load_current_factor": "every power line's load current (balanced and residual)",
    "fault_current_factor": "every power line's fault current (both ends)",
}

#: Factors that change the impedances or the networks: each sample is solved again.
PHYSICS_FACTORS = ("soil_resistivity_factor", "coating_resistance_factor",
                   "post_resistance_factor", "ground_resistance_factor")
#: Factors the response is linear in: applied to one solve by scaling.
LINEAR_FACTORS = ("load_current_factor", "fault_current_factor")

#: Table of per-polygon soil ranges, in Ω·m.
SOIL_TABLE = "soil_resistivity_ohm_m"
KEYS = {"members", "seed", SOIL_TABLE, *FACTORS}
RANGE_KEYS = {"low", "high", "distribution"}
MEMBERS_MAX = 4096
#: Largest factor of a range (a factor of 100 is far beyond any screening question).
FACTOR_MAX = 100.0


@dataclass(frozen=True)
class Range:
    """One uncertain input between ``low`` and ``high``.

    Attributes
    ----------
    name : str
        ``load_current_factor`` .. or ``soil:<polygon id>`` for a polygon's resistivity.
    low, high : float
        Bounds (a factor [-], or a resistivity [Ω·m] for a polygon). Equal bounds: a
        fixed value (zero width).
    distribution : str
        ``uniform`` or ``log-uniform``.
    """

    name: str
    low: float
    high: float
    distribution: str = "uniform"

    @property
    def fixed(self) -> bool:
        """True for a zero-width range."""
        return self.low == self.high

    def value(self, u):
        """The input at unit-interval positions ``u`` (inverse of the distribution)."""
        import numpy as np

        u = np.asarray(u, float)
        if self.fixed:
            return np.full(u.shape, self.low)
        if self.distribution == "log-uniform":
            lo, hi = math.log(self.low), math.log(self.high)
            return np.exp(lo + u * (hi - lo))
        return self.low + u * (self.high - self.low)

    def quantile(self, q: float) -> float:
        """The analytic ``q`` quantile of the input (for checks and the docs)."""
        return float(self.value(q))

    def as_dict(self) -> dict:
        return {"low": self.low, "high": self.high, "distribution": self.distribution}


@dataclass(frozen=True)
class Bands:
    """The validated ``[uncertainty]`` section.

    Attributes
    ----------
    members : int
        Ensemble size N.
    seed : int
        Seed of the Latin hypercube.
    ranges : tuple of Range
        The uncertain inputs, factors first (in :data:`FACTORS` order), then the soil
        polygons in the order given.
    """

    members: int
    seed: int
    ranges: tuple[Range, ...]

    def range(self, name: str) -> Range | None:
        """The range called ``name``, or None."""
        for r in self.ranges:
            if r.name == name:
                return r
        return None

    @property
    def soil_polygons(self) -> tuple[Range, ...]:
        """The per-polygon soil ranges (names ``soil:<polygon id>``)."""
        return tuple(r for r in self.ranges if r.name.startswith("soil:"))

    def as_dict(self) -> dict:
        """The section as run.json records it (and the cache keys hash it)."""
        return {"members": self.members, "seed": self.seed,
                "ranges": {r.name: r.as_dict() for r in self.ranges}}


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _range(raw: Any, name: str, where: str, problems: list[str], factor: bool
           ) -> Range | None:
    """One ``{ low, high, distribution }`` table, checked."""
    if not isinstance(raw, dict):
        problems.append(f"{where}: expected a table {{ low = ..., high = ...,"
                        f" distribution = \"uniform\" }}, got {raw!r}"[:200])
        return None
    bad = False
    for key in raw:
        if key not in RANGE_KEYS:
            allowed = ", ".join(sorted(RANGE_KEYS))
            problems.append(f"{where}.{key}: unknown key (allowed: {allowed})")
            bad = True
    bounds = {}
    for key in ("low", "high"):
        if key not in raw:
            problems.append(f"{where}.{key}: required, a positive number")
            bad = True
            continue
        value = _number(raw[key])
        if value is None or value <= 0:
            problems.append(f"{where}.{key}: expected a positive finite number, got"
                            f" {raw[key]!r}")
            bad = True
            continue
        if factor and value > FACTOR_MAX:
            problems.append(f"{where}.{key}: a factor above {FACTOR_MAX:g} ({value:g}) is not"
                            " a screening range")
            bad = True
            continue
        if factor and value < 1.0 / FACTOR_MAX:
            problems.append(f"{where}.{key}: a factor below {1.0 / FACTOR_MAX:g} ({value:g}) is"
                            " not a screening range")
            bad = True
            continue
        bounds[key] = value
    dist = raw.get("distribution", "uniform")
    if dist not in DISTRIBUTIONS:
        problems.append(f"{where}.distribution: {dist!r} is not one of"
                        f" {', '.join(DISTRIBUTIONS)}")
        bad = True
    if not bad and bounds["low"] > bounds["high"]:
        problems.append(f"{where}: low ({bounds['low']:g}) is above high ({bounds['high']:g})")
        bad = True
    if bad:
        return None
    return Range(name, bounds["low"], bounds["high"], str(dist))


def parse_uncertainty(raw: Any, file_name: str) -> tuple[Bands | None, list[str]]:
    """Check the ``[uncertainty]`` table of a config file.

    Parameters
    ----------
    raw : object
        The table as TOML read it (None: no section).
    file_name : str
        The config file's name, for messages.

    Returns
    -------
    bands : Bands or None
        None when the section is absent or has problems.
    problems : list of str
        Each naming the file and the key.
    """
    if raw is None:
        return None, []
    where = f"{file_name}: uncertainty"
    problems: list[str] = []
    if not isinstance(raw, dict):
        return None, [f"{where}: expected a table, got {raw!r}"[:200]]
    for key in raw:
        if key not in KEYS:
            problems.append(f"{where}.{key}: unknown key (allowed: {', '.join(sorted(KEYS))})")
    members = raw.get("members", 32)
    if isinstance(members, bool) or not isinstance(members, int) or not (
            1 <= members <= MEMBERS_MAX):
        problems.append(f"{where}.members: expected a whole number from 1 to {MEMBERS_MAX},"
                        f" got {members!r}")
    seed = raw.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0 or seed >= 2**63:
        problems.append(f"{where}.seed: expected a whole number >= 0, got {seed!r}")
    ranges: list[Range] = []
    for key in FACTORS:
        if key in raw:
            r = _range(raw[key], key, f"{where}.{key}", problems, factor=True)
            if r is not None:
                ranges.append(r)
    soil = raw.get(SOIL_TABLE, {})
    if not isinstance(soil, dict):
        problems.append(f"{where}.{SOIL_TABLE}: expected a table of soil polygon id ="
                        " { low = ..., high = ... } (resistivities in ohm-m)")
        soil = {}
    for pid, entry in soil.items():
        pid = str(pid).strip()
        if not pid:
            problems.append(f"{where}.{SOIL_TABLE}: an empty polygon id")
            continue
        r = _range(entry, f"soil:{pid}", f"{where}.{SOIL_TABLE}.{pid!r}", problems,
                   factor=False)
        if r is not None:
            if r.high > 1e5 or r.low < 0.1:
                problems.append(f"{where}.{SOIL_TABLE}.{pid!r}: resistivities from 0.1 to"
                                f" 1e5 ohm-m, got {r.low:g} .. {r.high:g}")
                continue
            ranges.append(r)
    if problems:
        return None, problems
    if not ranges:
        return None, [f"{where}: no range given; give at least one of"
                      f" {', '.join(FACTORS)} or a table {SOIL_TABLE}"]
    return Bands(int(members), int(seed), tuple(ranges)), []
