"""Normal load of the coupling stage: per-circuit loading and the worst case over unknowns.

Each line's circuits carry their own load, direction and phase offset where given;
what is not given is unknown, and the coupling takes the worst case over it
(docs/methods.md §8.4): lines of unknown direction and angle add in magnitude,
lines of known angle and unknown direction take the exact worst over their signs
(§18.5), the features of one line count as one line (§18.1), and each circuit of a
multi-circuit line is also taken out of service in turn.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.physics import induction
from corridor.physics._arrays import complex_bincount
from corridor.steps import normal_signs


@dataclass
class LineLoading:
    """Per-circuit normal loading of every line and the N−1 outage scenarios.

    Attributes
    ----------
    circuit_load_a, circuit_direction, circuit_offset_deg : list of ndarray, per line
        Load current [A], flow direction (+1 along the digitised direction, −1
        against) and phase-angle offset [deg] of each circuit, the line's own
        direction and offset folded in where they are given.
    group : ndarray of int, per line
        Phase group: 0 for lines whose flow direction and phase offset are both
        given (one common reference), a group of its own for every other line
        (relative direction and angle unknown: the worst case over them).
    known : ndarray of bool, per line
        Direction and angle given.
    weights : ndarray, shape (n_lines, n_scenarios, max_circuits)
        Circuit weights per scenario (:func:`corridor.physics.induction.outage_weights`);
        scenario 0 is the loading as given, rows a line lacks repeat it.
    n_scenarios : int
    """

    circuit_load_a: list
    circuit_direction: list
    circuit_offset_deg: list
    group: np.ndarray
    known: np.ndarray
    weights: np.ndarray
    n_scenarios: int
    #: Per line: phase offset given, flow direction not (the worst case over the sign
    #: alone, docs/methods.md §18.5).
    sign_only: np.ndarray | None = None


def _per_circuit(lines, li, field, n, default):
    """Per-circuit values of a line field: ``"400;300"``, one number for all, or missing."""
    from corridor.errors import InputError

    if field not in lines:
        return np.full(n, default, float)
    raw = lines[field].iloc[li]
    if raw is None or (isinstance(raw, float) and not np.isfinite(raw)):
        return np.full(n, default, float)
    parts = [p.strip() for p in str(raw).replace(",", ";").split(";") if p.strip()]
    if not parts:
        return np.full(n, default, float)
    try:
        values = np.array([float(p) for p in parts])
    except ValueError:
        raise InputError(f"power_lines: line {lines['line_id'].iloc[li]!r}, field {field}:"
                         f" {raw!r} is not a number or a ';'-separated list of numbers") from None
    if values.size == 1:
        values = np.full(n, values[0])
    if values.size != n:
        raise InputError(f"power_lines: line {lines['line_id'].iloc[li]!r}, field {field}:"
                         f" {values.size} values for {n} circuits")
    return values


def line_loading(cfg, lines, n_circuits_by_arrangement, route=None,
                 route_direction=None) -> LineLoading:
    """Per-circuit loading of every line, its phase group and the outage scenarios.

    Line fields (all optional): ``circuit_load_current_a``, ``circuit_flow_direction``
    and ``circuit_phase_offset_deg`` (one value or ``"a;b"`` per circuit; defaults
    ``load_current_a``, +1 and 0), ``flow_direction`` (±1) and ``phase_offset_deg``
    against the common reference. Where the line's direction or offset is missing it
    is unknown, and the coupling takes the worst case over it (docs/methods.md §8).
    Run setting ``outage_scenario`` (default true): also evaluate each circuit of a
    multi-circuit line out of service with the others carrying the line's total.

    ``route`` (per feature, the electrical line: features sharing a ``line_id``) and
    ``route_direction`` (+1 where the feature runs with its line's route, -1 against)
    make the features of one line one phase group with one flow direction where the
    direction is unknown (docs/methods.md §18); by default every feature is a line.
    """
    n_lines = len(lines)
    load = lines["load_current_a"].to_numpy(float)
    arr_names = lines["arrangement"].to_numpy(dtype=object)
    direction = (lines["flow_direction"].to_numpy(float) if "flow_direction" in lines
                 else np.full(n_lines, np.nan))
    offset = (lines["phase_offset_deg"].to_numpy(float) if "phase_offset_deg" in lines
              else np.full(n_lines, np.nan))
    known = np.isfinite(direction) & np.isfinite(offset)
    route = np.arange(n_lines) if route is None else np.asarray(route, np.int64)
    route_dir = (np.ones(n_lines) if route_direction is None
                 else np.asarray(route_direction, float))
    group = np.where(known, 0, 1 + route)
    outage = bool(cfg.run.outage_scenario)
    max_nc = max(n_circuits_by_arrangement.values(), default=1)
    n_scen = 1 + max_nc if (outage and max_nc > 1) else 1
    weights = np.ones((n_lines, n_scen, max_nc))
    loads, dirs, offs = [], [], []
    for li in range(n_lines):
        nc = n_circuits_by_arrangement.get(arr_names[li], 1)
        c_load = _per_circuit(lines, li, "circuit_load_current_a", nc, load[li])
        c_dir = _per_circuit(lines, li, "circuit_flow_direction", nc, 1.0)
        c_off = _per_circuit(lines, li, "circuit_phase_offset_deg", nc, 0.0)
        line_dir = direction[li] if np.isfinite(direction[li]) else route_dir[li]
        line_off = offset[li] if np.isfinite(offset[li]) else 0.0
        loads.append(c_load)
        dirs.append(c_dir * line_dir)
        offs.append(c_off + line_off)
        if n_scen > 1 and nc > 1:
            w = induction.outage_weights(c_load)
            weights[li, :len(w), :nc] = w
    sign_only = np.isfinite(offset) & ~np.isfinite(direction)
    return LineLoading(loads, dirs, offs, group, known, weights, n_scen, sign_only)


def normal_load_assumption(cfg, lines) -> str:
    """Plain-language statement of the normal-load unknowns and how they are bounded.

    For run.json (``normal_load_assumption``) and the report (docs/methods.md §8).
    """
    # one count per electrical line (the features of one line give these alike)
    lines = lines.drop_duplicates("line_id") if "line_id" in lines else lines
    n_lines = len(lines)
    given = np.zeros(n_lines, bool)
    if "flow_direction" in lines and "phase_offset_deg" in lines:
        given = (np.isfinite(lines["flow_direction"].to_numpy(float))
                 & np.isfinite(lines["phase_offset_deg"].to_numpy(float)))
    text = ("Normal load: the flow direction and phase angle of each power line relative to"
            " the others are unknown unless the line gives flow_direction and phase_offset_deg"
            f" ({int(n_lines - given.sum())} of {n_lines} lines give neither or only one), and"
            " the residual current's angle is unknown; the normal-load EMF, voltage and current"
            " are the worst case over these angles (the sum of the magnitudes of the"
            " independent parts; a line that gives its phase offset but not its flow"
            " direction: the EMF is the exact worst over its direction, the voltage and"
            " current keep the sum of magnitudes).")
    if bool(cfg.run.outage_scenario):
        text += (" Each circuit of a multi-circuit line is also taken out of service in turn,"
                 " the others carrying the line's total load; the worse case is kept and named"
                 " in the column normal_scenario.")
    return text


@dataclass
class WorstNormal:
    """Result of :func:`worst_case_normal`."""

    emf_v: np.ndarray  # worst |EMF| per segment [V]
    governing: np.ndarray  # scenario label per segment
    component_segment: np.ndarray
    component_slot: np.ndarray
    component_emf_v: np.ndarray


def worst_case_normal(sec_seg, sec_line, sec_asset, bal_sec, res_sec, loading: LineLoading,
                      n_seg, line_ids, route=None) -> WorstNormal:
    """Worst-case normal-load EMF per segment and its independent components.

    The worst |EMF| over unknown relative directions and angles and over the N−1 outage
    scenarios comes from :func:`corridor.physics.induction.worst_normal_emf` (closed form:
    Σ over phase groups of |group phasor sum| + Σ over lines of |residual|). The
    components (each phase group's balanced EMF, each line's residual EMF, in the
    segment's governing scenario) are what the response solves one by one: the worst
    voltage at a node is then Σ |V_component| (docs/methods.md §8).

    ``route`` (per feature) joins the features of one electrical line: their EMFs add
    as phasors, their residual is one unknown angle and their outage one scenario
    (docs/methods.md §18).
    """
    n_lines = len(loading.group)
    route = np.arange(n_lines) if route is None else np.asarray(route, np.int64)
    sec_route = route[sec_line] if len(sec_line) else np.zeros(0, np.int64)
    worst = induction.worst_normal_emf(sec_seg, sec_route, loading.group[sec_line], bal_sec,
                                       res_sec, n_seg)
    n_sec = len(sec_seg)
    # scenario of each section: the governing outage where it concerns the section's line
    gov_line = np.where(worst.governing_entry >= 0,
                        sec_line[np.maximum(worst.governing_entry, 0)] if n_sec else -1, -1)
    gov_route = (np.where(gov_line >= 0, route[np.maximum(gov_line, 0)], -1) if len(route)
                 else np.full(len(gov_line), -1, np.int64))
    scen = np.where(gov_route[sec_seg] == sec_route, worst.governing_scenario[sec_seg], 0)
    rows = np.arange(n_sec)
    bal = bal_sec[rows, scen] if n_sec else np.zeros(0, complex)
    res = res_sec[rows, scen] if n_sec else np.zeros(0, complex)
    governing = np.full(n_seg, "as given", dtype=object)
    for k in np.flatnonzero(worst.governing_entry >= 0):
        governing[k] = (f"outage {line_ids[gov_line[k]]} circuit"
                        f" {int(worst.governing_scenario[k])}")
    # components: (asset, phase group) balanced, (asset, line) residual
    comp_key = np.concatenate([sec_asset.astype(np.int64) * (2 * n_lines + 2)
                               + loading.group[sec_line],
                               sec_asset.astype(np.int64) * (2 * n_lines + 2) + n_lines + 1
                               + sec_route])
    values = np.concatenate([bal, res])
    segs = np.concatenate([sec_seg, sec_seg])
    comps, comp_of = np.unique(comp_key, return_inverse=True)
    comp_of = comp_of.ravel()
    entry_key = comp_of.astype(np.int64) * max(n_seg, 1) + segs
    entries, entry_of = np.unique(entry_key, return_inverse=True)
    emf = complex_bincount(entry_of.ravel(), values, len(entries))
    entry_comp = entries // max(n_seg, 1)
    entry_seg = entries % max(n_seg, 1)
    comp_asset = comps // (2 * n_lines + 2)
    first = np.searchsorted(comp_asset, comp_asset, side="left")
    slot = (np.arange(len(comps)) - first)[entry_comp]
    emf_v = worst.emf_v
    if loading.sign_only is not None and np.any(loading.sign_only[sec_line]):
        emf_v = _exact_over_signs(emf_v, sec_seg, sec_line, sec_route, bal_sec[:, 0],
                                  loading, n_seg, worst.governing_entry < 0)
    return WorstNormal(emf_v, governing, entry_seg.astype(np.int64),
                       slot.astype(np.int64), emf)


def _exact_over_signs(emf_v, sec_seg, sec_line, sec_route, bal, loading: LineLoading, n_seg,
                      as_given) -> np.ndarray:
    """The worst EMF with the lines of known angle and unknown direction taken exactly.

    :func:`corridor.physics.induction.worst_normal_emf` counts each such line as a
    group of its own, |G₀| + Σ|E_k|; the exact worst over their unknown signs is
    max_s |G₀ + Σ s_k E_k| (:func:`corridor.steps.normal_signs.worst_over_signs`,
    docs/methods.md §18.5). Applied where the loading as given governs (an outage
    keeps the bound, which stays conservative).
    """
    assert loading.sign_only is not None  # the caller checks
    sign = loading.sign_only[sec_line]
    g0 = loading.group[sec_line] == 0
    fixed = complex_bincount(sec_seg[g0], bal[g0], n_seg)
    key = sec_seg[sign].astype(np.int64) * (int(sec_route.max()) + 1) + sec_route[sign]
    keys, inv = np.unique(key, return_inverse=True)
    e_k = complex_bincount(inv.ravel(), bal[sign], len(keys))
    k_seg = keys // (int(sec_route.max()) + 1)
    exact = normal_signs.worst_over_signs(fixed, k_seg, e_k, n_seg)
    bound = np.abs(fixed) + np.bincount(k_seg, weights=np.abs(e_k), minlength=n_seg)
    return np.where(as_given, emf_v + np.minimum(exact - bound, 0.0), emf_v)
