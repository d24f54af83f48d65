"""Criterion methods of the limit sets: their parameters and permitted values.

Each method (the ``method`` key of a criterion) declares its parameters as
:class:`corridor.settings.Spec` (the one spec type of corridor) with a rule of
its own (``check``), and computes the permitted value of the quantity per
segment from a :class:`Context`.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from corridor.limits import criteria as crit
from corridor.settings import Spec

_NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")

#: Coupling cases a criterion may belong to.
CASES = ("normal", "fault", "capacitive", "conductive")


def _p(check: Callable[[Any], tuple[Any, str | None]], default: Any = None, doc: str = "", *,
       name: str = "", dtype: str = "float", unit: str = "-") -> Spec:
    """A method parameter: a :class:`Spec` whose rule is ``check``; no default: required."""
    return Spec(name, dtype, default, doc=doc, unit=unit, check=check)




def _is_number(x):
    return isinstance(x, int | float) and not isinstance(x, bool)


def _positive(x):
    if not _is_number(x) or not np.isfinite(x) or x <= 0:
        return None, f"expected a positive number, got {x!r}"
    return float(x), None


def _non_negative(x):
    if not _is_number(x) or not np.isfinite(x) or x < 0:
        return None, f"expected a number >= 0, got {x!r}"
    return float(x), None


def _bool(x):
    if not isinstance(x, bool):
        return None, f"expected true or false, got {x!r}"
    return x, None


def _string(x):
    if not isinstance(x, str):
        return None, f"expected a string, got {x!r}"
    return x, None


def _identifier(x):
    if not isinstance(x, str) or not _NAME_RE.match(x):
        return None, f"expected a lower-case name such as 'v_normal_v', got {x!r}"
    return x, None


def _body_weight(x):
    if not _is_number(x) or x not in (50, 70):
        return None, f"expected 50 or 70 (IEEE Std 80 body weights), got {x!r}"
    return int(x), None


def _positive_list(x):
    if not isinstance(x, list) or not x:
        return None, f"expected a non-empty list of positive numbers, got {x!r}"
    out = []
    for v in x:
        f, problem = _positive(v)
        if problem:
            return None, f"expected a non-empty list of positive numbers, got {x!r}"
        out.append(f)
    return tuple(out), None


def _increasing_list(x):
    out, problem = _positive_list(x)
    if problem:
        return out, problem
    if any(b <= a for a, b in zip(out, out[1:], strict=False)):
        return None, f"durations must be strictly increasing, got {x!r}"
    return out, None


def _value_by_category(x):
    if not isinstance(x, dict) or not x:
        return None, f"expected a table of category = positive number, got {x!r}"
    out = []
    for k, v in x.items():
        f, problem = _positive(v)
        if problem:
            return None, f"category {k!r}: {problem}"
        out.append((k, f))
    return tuple(sorted(out)), None


def _choice(options):
    def check(x):
        if x not in options:
            return None, f"expected one of {list(options)}, got {x!r}"
        return x, None
    return check


def _names(x):
    if not isinstance(x, list) or not x or any(
            not isinstance(v, str) or not _NAME_RE.match(v) for v in x):
        return None, ("expected a non-empty list of lower-case names of inputs, such as"
                      f" ['dc_current_density_a_per_m2'], got {x!r}")
    return tuple(x), None


def asset_kinds_check(kinds: tuple[str, ...]):
    """The rule of ``applies_to``: a non-empty list drawn from ``kinds``."""
    def check(x):
        if (not isinstance(x, list) or not x
                or any(not isinstance(k, str) or k not in kinds for k in x)):
            return None, f"expected a non-empty list drawn from {list(kinds)}, got {x!r}"
        return tuple(x), None
    return check


# --------------------------------------------------------------------------
# Methods: how each criterion computes its permitted value per segment
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class Context:
    """Per-segment data a method may need, each an ndarray of shape (n,).

    Parameters
    ----------
    clearing_time_s : ndarray of float
        Fault clearing time of the inducing line [s].
    soil_resistivity_ohm_m : ndarray of float
        Soil resistivity at the segment [Ω·m].
    high_reliability : ndarray of bool
        High-reliability power line (ITU-T Directives sense).
    categories : Mapping[str, ndarray of str]
        Named per-segment labels, e.g. ``coating_type``.
    n : int
        Number of segments.
    """

    clearing_time_s: np.ndarray
    soil_resistivity_ohm_m: np.ndarray
    high_reliability: np.ndarray
    categories: Mapping[str, np.ndarray]
    n: int


def _permitted_constant(p, ctx):
    return np.full(ctx.n, p["value"])


def _permitted_table(p, ctx):
    return crit.interpolate_vs_duration(ctx.clearing_time_s, p["table_duration_s"],
                                        p["table_value"])


def _ieee80_surface(p, ctx):
    rho = ctx.soil_resistivity_ohm_m
    if p["surface_layer"]:
        rho_s = np.full(ctx.n, p["surface_resistivity_ohm_m"])
        cs = crit.surface_layer_derating(rho, rho_s, p["surface_thickness_m"])
    else:
        rho_s, cs = rho, np.ones(ctx.n)
    return rho_s, cs


def _permitted_ieee80_touch(p, ctx):
    rho_s, cs = _ieee80_surface(p, ctx)
    return crit.ieee80_touch_voltage_v(ctx.clearing_time_s, p["body_weight_kg"], rho_s, cs)


def _permitted_ieee80_step(p, ctx):
    rho_s, cs = _ieee80_surface(p, ctx)
    return crit.ieee80_step_voltage_v(ctx.clearing_time_s, p["body_weight_kg"], rho_s, cs)


def _permitted_itu(p, ctx):
    return crit.itu_telecom_fault_limit_v(
        ctx.clearing_time_s, ctx.high_reliability,
        normal_limit_v=p["normal_limit_v"],
        high_reliability_limit_v=p["high_reliability_limit_v"],
        high_reliability_max_clearing_s=p["high_reliability_max_clearing_s"])


def _permitted_by_category(p, ctx):
    table = dict(p["value_by_category"])
    fallback = min(table.values())  # unknown or missing label: the strictest value
    labels = ctx.categories.get(p["category"])
    out = np.full(ctx.n, fallback)
    if labels is not None:
        labels = np.broadcast_to(np.asarray(labels).astype(str), (ctx.n,))
        for label, value in table.items():
            out[labels == label] = value
    return out


def _num(v: float, unit: str) -> str:
    return f"{float(v):g} {unit}".rstrip() if unit and unit != "-" else f"{float(v):g}"


def _text_constant(p, unit):
    return _num(p["value"], unit)


def _text_table(p, unit):
    d, v = p["table_duration_s"], p["table_value"]
    points = "; ".join(f"{_num(b, unit)} at {a:g} s" for a, b in zip(d, v, strict=True))
    return f"read at the clearing time from {len(d)} points: {points}"


def _text_ieee80(kind):
    def text(p, unit):
        feet = "1.5" if kind == "touch" else "6"
        k = crit.IEEE80_K_BY_BODY_WEIGHT_KG[int(p["body_weight_kg"])]
        ground = (f"a {p['surface_thickness_m']:g} m surface layer of"
                  f" {p['surface_resistivity_ohm_m']:g} Ω·m" if p["surface_layer"]
                  else "native soil (Cs = 1, ρs = soil resistivity)")
        return (f"(1000 Ω + {feet}·Cs·ρs)·{k:g}/√t V for {p['body_weight_kg']:g} kg, standing"
                f" on {ground}; t the clearing time [s]")
    return text


def _text_itu(p, unit):
    return (f"{_num(p['normal_limit_v'], 'V')}; {_num(p['high_reliability_limit_v'], 'V')}"
            " on a high-reliability line cleared within"
            f" {p['high_reliability_max_clearing_s']:g} s")


def _text_by_category(p, unit):
    table = dict(p["value_by_category"])
    items = ", ".join(f"{k}: {_num(v, unit)}" for k, v in sorted(table.items()))
    return (f"by {p['category'].replace('_', ' ')}: {items} (an unknown one takes"
            f" {_num(min(table.values()), unit)})")


@dataclass(frozen=True)
class MethodSpec:
    """A criterion method: its parameters and its permitted-value function.

    Parameters
    ----------
    params : Mapping of str to Spec
        The method's parameters.
    permitted : callable
        ``permitted(params, ctx)``: permitted value per segment.
    doc : str
        One line on the method.
    text : callable, optional
        ``text(params, unit)``: the permitted value in words, for reports
        (e.g. ``"15 V"``, or the formula with its constants).
    uses_clearing_time : bool
        True where the permitted value depends on the fault clearing time.
    """

    params: Mapping[str, Spec]
    permitted: Callable[[Mapping[str, Any], Context], np.ndarray]
    doc: str = ""
    text: Callable[[Mapping[str, Any], str], str] | None = None
    uses_clearing_time: bool = False

    def limit_text(self, params: Mapping[str, Any], unit: str = "") -> str:
        """The permitted value in words, for reports.

        Parameters
        ----------
        params : Mapping
            The criterion's parameters (defaults filled in).
        unit : str, optional
            Unit of the judged quantity, e.g. ``"V"``.

        Returns
        -------
        str
        """
        return self.text(params, unit) if self.text is not None else self.doc


_IEEE80_PARAMS = {
    "body_weight_kg": _p(_body_weight, 50,
                                "50 or 70 [kg]; 50 kg is the conservative choice."),
    "surface_layer": _p(_bool, False,
                               "true: stand on a surface layer of the given resistivity and "
                               "thickness; false: on native soil (ρs = soil ρ, Cs = 1)."),
    "surface_resistivity_ohm_m": _p(_positive, 3000.0,
                                           "Surface-layer resistivity ρs [Ω·m]."),
    "surface_thickness_m": _p(_non_negative, 0.1, "Surface-layer thickness hs [m]."),
}

#: Registry of criterion methods, keyed by the ``method`` value in the TOML.
METHODS: Mapping[str, MethodSpec] = {
    "constant": MethodSpec(
        {"value": _p(_positive, doc="Permitted value, in the quantity's unit.")},
        _permitted_constant, "One permitted value everywhere.", _text_constant),
    "table_vs_time": MethodSpec(
        {"table_duration_s": _p(_increasing_list,
                                       doc="Durations [s], strictly increasing."),
         "table_value": _p(_positive_list,
                                  doc="Permitted values at those durations, quantity's unit.")},
        _permitted_table,
        "Published value-vs-duration table read at the clearing time, log-log interpolated.",
        _text_table, uses_clearing_time=True),
    "ieee80_touch": MethodSpec(_IEEE80_PARAMS, _permitted_ieee80_touch,
                               "IEEE Std 80 tolerable touch voltage at the clearing time.",
                               _text_ieee80("touch"), uses_clearing_time=True),
    "ieee80_step": MethodSpec(_IEEE80_PARAMS, _permitted_ieee80_step,
                              "IEEE Std 80 tolerable step voltage at the clearing time.",
                              _text_ieee80("step"), uses_clearing_time=True),
    "itu_telecom_fault": MethodSpec(
        {"normal_limit_v": _p(_positive, 430.0, "Ordinary lines [V]."),
         "high_reliability_limit_v": _p(_positive, 650.0,
                                               "High-reliability lines cleared fast [V]."),
         "high_reliability_max_clearing_s": _p(_positive, 0.2,
                                                      "Longest clearing time for the higher "
                                                      "limit [s], inclusive.")},
        _permitted_itu, "ITU-T Directives fault EMF limit.", _text_itu,
        uses_clearing_time=True),
    "constant_by_category": MethodSpec(
        {"category": _p(_identifier,
                               doc="Name of the per-segment label, e.g. 'coating_type'."),
         "value_by_category": _p(_value_by_category,
                                        doc="Table label = permitted value; an unknown or "
                                            "missing label takes the smallest value.")},
        _permitted_by_category, "Permitted value chosen by a per-segment label.",
        _text_by_category),
}


def _string_list(x):
    if not isinstance(x, list) or any(not isinstance(s, str) for s in x):
        return None, f"expected a list of strings, got {x!r}"
    return tuple(x), None


def _fraction(x):
    if not _is_number(x) or not 0 < x < 1:
        return None, f"expected a number between 0 and 1 (exclusive), got {x!r}"
    return float(x), None
