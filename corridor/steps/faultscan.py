"""Earth faults fed from both ends of each line: sources, scan inputs, tower earth potential.

Used by the coupling stage (:mod:`corridor.steps.couple`):

- :func:`line_sources`: every electrical line (the features sharing a
  ``line_id``, chained end to end) with its sequence impedances from the
  arrangement and the terminal sources fitted to its terminal fault currents
  (docs/methods.md §8.1);
- :func:`fault_positions`: per fault case (asset, electrical line), the fault
  positions to scan, and the currents fed from each end for a fault at each
  (§8.2);
- :func:`tower_earth_potential`: earth potential and step voltage beside each
  asset segment from a faulted tower, with the tower's share of the fault
  current from the earth-wire ladder and a zone of influence from a voltage
  threshold (§4.2-§4.6).

Everything here depends on the lines alone, never on which other assets are in
the run or in the partition.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.physics import conductive, faults, induction

log = logging.getLogger(__name__)

#: Optional power-line fields of the source model and their defaults (§8.1).
SOURCE_FIELDS = {
    "source_x_over_r_start": faults.DEFAULT_SOURCE_X_OVER_R,
    "source_x_over_r_end": faults.DEFAULT_SOURCE_X_OVER_R,
    "source_z0_over_z1_start": faults.DEFAULT_SOURCE_Z0_OVER_Z1,
    "source_z0_over_z1_end": faults.DEFAULT_SOURCE_Z0_OVER_Z1,
}


@dataclass
class LineSources:
    """Electrical lines (routes) of a run and their two-terminal fault sources.

    Per feature of the power-line layer: its route, where it starts along the
    route (``offset_m``) and whether it runs with the route (``direction``
    +1) or against it (-1). Per route: length, terminal sources, voltage.
    """

    route: np.ndarray  # per feature
    offset_m: np.ndarray  # per feature: route chainage of the feature's route-start end
    direction: np.ndarray  # per feature: +1 or -1
    length_m: np.ndarray  # per feature
    z1_ohm_per_m: np.ndarray  # per feature
    z0_ohm_per_m: np.ndarray  # per feature
    earth_wire_ohm_per_m: np.ndarray  # per feature: earth wires in parallel (NaN: none)
    route_feature: np.ndarray  # per route: its first feature (gives id, clearing time)
    route_length_m: np.ndarray
    y1_start_s: np.ndarray  # per route
    y0_start_s: np.ndarray
    y1_end_s: np.ndarray
    y0_end_s: np.ndarray
    phase_voltage_v: np.ndarray
    # features of all routes sorted by (route, offset), with the cumulated impedances
    _sorted: np.ndarray
    _z1_before: np.ndarray
    _z0_before: np.ndarray

    def route_position(self, feature, position_m):
        """Route chainage of a point ``position_m`` along ``feature`` [m]."""
        f = np.asarray(feature, np.int64)
        p = np.clip(np.asarray(position_m, float), 0.0, self.length_m[f])
        return self.offset_m[f] + np.where(self.direction[f] > 0, p, self.length_m[f] - p)

    def feature_at(self, route, position_m):
        """Feature of the line at a route chainage (the later one at a joint)."""
        r = np.asarray(route, np.int64)
        x = np.clip(np.asarray(position_m, float), 0.0, self.route_length_m[r])
        key_f = self.route[self._sorted] * 1e9 + self.offset_m[self._sorted]
        k = np.clip(np.searchsorted(key_f, r * 1e9 + x, side="right") - 1, 0, len(key_f) - 1)
        return self._sorted[k]

    def impedances(self, route, position_m):
        """Sequence impedances from terminal A to the point, and from it to B [Ω]."""
        r = np.asarray(route, np.int64)
        x = np.clip(np.asarray(position_m, float), 0.0, self.route_length_m[r])
        key_f = self.route[self._sorted] * 1e9 + self.offset_m[self._sorted]
        k = np.clip(np.searchsorted(key_f, r * 1e9 + x, side="right") - 1, 0, len(key_f) - 1)
        f = self._sorted[k]
        dx = np.clip(x - self.offset_m[f], 0.0, self.length_m[f])
        z1a = self._z1_before[k] + self.z1_ohm_per_m[f] * dx
        z0a = self._z0_before[k] + self.z0_ohm_per_m[f] * dx
        last = np.searchsorted(self.route[self._sorted], r, side="right") - 1
        fl = self._sorted[last]
        z1_total = self._z1_before[last] + self.z1_ohm_per_m[fl] * self.length_m[fl]
        z0_total = self._z0_before[last] + self.z0_ohm_per_m[fl] * self.length_m[fl]
        return z1a, z0a, z1_total - z1a, z0_total - z0a

    def currents(self, route, position_m) -> faults.FaultCurrents:
        """Fault currents for a single line-to-earth fault at a route chainage [A]."""
        r = np.asarray(route, np.int64)
        z1a, z0a, z1b, z0b = self.impedances(r, position_m)
        return faults.slg_fault_currents(self.y1_start_s[r], self.y0_start_s[r],
                                         self.y1_end_s[r], self.y0_end_s[r], z1a, z0a, z1b, z0b,
                                         self.phase_voltage_v[r])


def _end_points(geometries):
    import shapely

    n = len(geometries)
    start = np.zeros((n, 2))
    end = np.zeros((n, 2))
    for i, g in enumerate(geometries):
        parts = list(getattr(g, "geoms", [g]))
        c0 = shapely.get_coordinates(parts[0])
        c1 = shapely.get_coordinates(parts[-1])
        start[i], end[i] = c0[0], c1[-1]
    return start, end


#: Gap between two features' ends [m] below which they are taken as joined (common
#: practice: digitising tolerance of utility line data is metres).
JOIN_TOLERANCE_M = 1.0


def _chain(members, start, end):
    """Order and orient the features of one line end to end.

    The route starts at a free end (one no other feature of the line touches within
    :data:`JOIN_TOLERANCE_M`): the first vertex of the first feature in layer order
    that has a free first vertex, else the free last vertex of the first such feature
    (else, a line closing on itself, the first feature's first vertex). Each next
    feature is the one whose nearer end lies closest to the tip, whatever the layer
    order.

    Returns
    -------
    order : list of int
        The members in route order.
    direction : dict
        +1 where the feature runs with the route, -1 against.
    """
    ends = {f: (start[f], end[f]) for f in members}

    def gap(p, others):
        return min((np.hypot(*(p - q)) for g in others for q in ends[g]), default=np.inf)

    head, head_dir = members[0], 1
    free = [(f, d) for d in (1, -1) for f in members  # free first vertices first
            if gap(start[f] if d > 0 else end[f], [g for g in members if g != f])
            > JOIN_TOLERANCE_M]
    if free:
        head, head_dir = free[0]
    order, direction = [head], {head: head_dir}
    tip = end[head] if head_dir > 0 else start[head]
    left = [g for g in members if g != head]
    while left:
        d = [(min(np.hypot(*(start[g] - tip)), np.hypot(*(end[g] - tip))), k)
             for k, g in enumerate(left)]
        _, k = min(d)
        g = left.pop(k)
        direction[g] = 1 if np.hypot(*(start[g] - tip)) <= np.hypot(*(end[g] - tip)) else -1
        tip = end[g] if direction[g] > 0 else start[g]
        order.append(g)
    return order, direction


def _routes(lines, feature_length_m):
    """Route, offset and direction of every feature (features sharing a line_id chained
    end to end by :func:`_chain`)."""
    n = len(lines)
    ids = lines["line_id"].to_numpy(dtype=object)
    route_ids, route = np.unique(ids.astype(str), return_inverse=True)
    offset = np.zeros(n)
    direction = np.ones(n, np.int64)
    if len(route_ids) == n:
        return route.astype(np.int64), offset, direction
    start, end = _end_points(lines.geometry.to_numpy())
    for r in range(len(route_ids)):
        members = [int(f) for f in np.flatnonzero(route == r)]  # layer order
        if len(members) < 2:
            continue
        order, dirs = _chain(members, start, end)
        along = 0.0
        for f in order:
            direction[f] = dirs[f]
            offset[f] = along
            along += feature_length_m[f]
    return route.astype(np.int64), offset, direction


def _arrangement_impedances(arr, soil_resistivity_ohm_m, frequency_hz):
    """z1, z0 of an arrangement's circuits (mean over circuits) and its earth wires [Ω/m]."""
    cond = arr.conductors
    x = np.array([c.x_m for c in cond])
    h = np.array([c.height_m for c in cond])
    gmr = np.array([c.gmr_m for c in cond])
    res = np.array([c.resistance_ohm_per_km for c in cond]) / 1000.0
    z = induction.impedance_matrix(x, h, gmr, res, soil_resistivity_ohm_m, frequency_hz)
    phases = [i for i, c in enumerate(cond) if c.circuit >= 0]
    wires = [i for i, c in enumerate(cond) if c.circuit < 0]
    reduced = faults.kron_reduce(z, phases, wires)
    circuit = np.array([cond[i].circuit for i in phases])
    z1s, z0s = [], []
    for c in np.unique(circuit):
        block = np.flatnonzero(circuit == c)
        if len(block) != 3:
            continue
        z1, z0 = faults.sequence_impedances(reduced[np.ix_(block, block)])
        z1s.append(z1)
        z0s.append(z0)
    ew = np.nan + 0j
    if wires:
        zss = z[np.ix_(wires, wires)]
        ew = 1.0 / np.sum(np.linalg.inv(zss))  # earth wires in parallel
    return complex(np.mean(z1s)), complex(np.mean(z0s)), complex(ew)


def line_sources(cfg, inputs, feature_length_m) -> LineSources:
    """Electrical lines and their terminal sources (docs/methods.md §8.1).

    Parameters
    ----------
    cfg : corridor.config.Config
    inputs : corridor.io.layers.Inputs
    feature_length_m : ndarray
        Length of every power-line feature [m].
    """
    lines = inputs.lines
    n = len(lines)
    f_hz = cfg.run.frequency_hz
    rho = float(cfg.run.default_soil_resistivity_ohm_m)
    route, offset, direction = _routes(lines, feature_length_m)
    names = lines["arrangement"].to_numpy(dtype=object)
    z1 = np.zeros(n, complex)
    z0 = np.zeros(n, complex)
    ew = np.zeros(n, complex)
    for name in set(names.tolist()):
        sel = names == name
        z1[sel], z0[sel], ew[sel] = _arrangement_impedances(cfg.arrangements[name], rho, f_hz)
    n_route = int(route.max()) + 1 if n else 0
    order = np.lexsort((offset, route))
    z1_before = np.zeros(n, complex)
    z0_before = np.zeros(n, complex)
    route_len = np.zeros(n_route)
    first = np.full(n_route, -1, np.int64)
    last = np.full(n_route, -1, np.int64)
    for k, f in enumerate(order):
        r = route[f]
        if first[r] < 0:
            first[r] = f
        else:
            prev = order[k - 1]
            z1_before[k] = z1_before[k - 1] + z1[prev] * feature_length_m[prev]
            z0_before[k] = z0_before[k - 1] + z0[prev] * feature_length_m[prev]
        last[r] = f
        route_len[r] = max(route_len[r], offset[f] + feature_length_m[f])
    i_start = lines["fault_current_start_ka"].to_numpy(float) * 1000.0
    i_end = lines["fault_current_end_ka"].to_numpy(float) * 1000.0
    # terminal A is the route's start, B its end. The features of one line carry the same
    # terminal data (corridor.io.line_parts); a feature's "start" is its first vertex, so
    # the route's start takes fault_current_start_ka where its first feature runs with
    # the route, fault_current_end_ka where against (docs/methods.md §18).
    fwd = direction[first] > 0
    i_a = np.where(fwd, i_start[first], i_end[first])
    i_b = np.where(fwd, i_end[first], i_start[first])

    def field(name, default):
        if name in lines:
            v = lines[name].to_numpy(float)
            return np.where(np.isfinite(v), v, default)
        return np.full(n, default)

    xr_s, xr_e = field("source_x_over_r_start", SOURCE_FIELDS["source_x_over_r_start"]), field(
        "source_x_over_r_end", SOURCE_FIELDS["source_x_over_r_end"])
    k_s, k_e = field("source_z0_over_z1_start", SOURCE_FIELDS["source_z0_over_z1_start"]), field(
        "source_z0_over_z1_end", SOURCE_FIELDS["source_z0_over_z1_end"])
    xr_a = np.where(fwd, xr_s[first], xr_e[first])
    xr_b = np.where(fwd, xr_e[first], xr_s[first])
    k_a = np.where(fwd, k_s[first], k_e[first])
    k_b = np.where(fwd, k_e[first], k_s[first])
    voltage = lines["voltage_kv"].to_numpy(float)[first] * 1000.0 / np.sqrt(3.0)
    z1_total = np.zeros(n_route, complex)
    z0_total = np.zeros(n_route, complex)
    np.add.at(z1_total, route, z1 * feature_length_m)
    np.add.at(z0_total, route, z0 * feature_length_m)
    src = faults.source_admittances(i_a, i_b, voltage, z1_total, z0_total, xr_a, xr_b, k_a, k_b)
    ids = lines["line_id"].to_numpy(dtype=object)
    for r in np.flatnonzero(~np.asarray(src.consistent, bool)):
        log.warning("line %s: the fault currents given at its two ends (%.1f kA, %.1f kA) cannot"
                    " both hold with its own impedance; the weaker end's source is taken as"
                    " absent, so the fault current there is the larger one fed through the line"
                    " (docs/methods.md §8.1)", ids[first[r]], i_a[r] / 1e3, i_b[r] / 1e3)
    return LineSources(route, offset, direction.astype(float), np.asarray(feature_length_m, float),
                       z1, z0, np.where(np.isfinite(ew), ew, np.nan), first, route_len,
                       np.atleast_1d(src.y1_start_s), np.atleast_1d(src.y0_start_s),
                       np.atleast_1d(src.y1_end_s), np.atleast_1d(src.y0_end_s), voltage,
                       order, z1_before, z0_before)


def route_towers(sources: LineSources, tower_line, tower_pos_m):
    """Towers in route chainage: (route, chainage) sorted, duplicates at joints merged."""
    if len(tower_line) == 0:
        return np.zeros(0, np.int64), np.zeros(0)
    r = sources.route[tower_line]
    x = np.round(sources.route_position(tower_line, tower_pos_m), 3)
    key = np.unique(np.stack([r.astype(float), x], axis=1), axis=0)
    return key[:, 0].astype(np.int64), key[:, 1]


@dataclass
class FaultPositions:
    """Per fault case: positions to scan (padded with NaN) and the currents from each end."""

    position_m: np.ndarray  # (n_case, n_max) route chainage
    current_start_a: np.ndarray  # (n_case, n_max) residual current fed from terminal A
    current_end_a: np.ndarray  # (n_case, n_max) residual current fed from terminal B
    fault_current_a: np.ndarray  # (n_case, n_max) total fault current


def fault_positions(sources: LineSources, case_route, case_min_m, case_max_m, t_route,
                    t_pos) -> FaultPositions:
    """Fault positions of each case: towers from the last before to the first after the
    case's sections, plus the route's two ends (docs/methods.md §8.2)."""
    n_case = len(case_route)
    lists = []
    t_key = t_route * 1e9 + t_pos
    for c in range(n_case):
        r = case_route[c]
        lo_i = np.searchsorted(t_key, r * 1e9 + case_min_m[c], side="right") - 1
        hi_i = np.searchsorted(t_key, r * 1e9 + case_max_m[c], side="left")
        lo_i = max(lo_i, int(np.searchsorted(t_route, r, side="left")))
        hi_i = min(hi_i, int(np.searchsorted(t_route, r, side="right")) - 1)
        pts = t_pos[lo_i:hi_i + 1] if hi_i >= lo_i else np.zeros(0)
        lists.append(np.unique(np.r_[0.0, pts, sources.route_length_m[r]]))
    n_max = max((len(v) for v in lists), default=1)
    pos = np.full((n_case, n_max), np.nan)
    for c, v in enumerate(lists):
        pos[c, :len(v)] = v
    ok = np.isfinite(pos)
    route = np.broadcast_to(np.asarray(case_route, np.int64)[:, None], pos.shape)
    i_a = np.zeros(pos.shape, complex)
    i_b = np.zeros(pos.shape, complex)
    i_f = np.zeros(pos.shape, complex)
    if ok.any():
        cur = sources.currents(route[ok], pos[ok])
        i_a[ok], i_b[ok], i_f[ok] = cur.residual_start_a, cur.residual_end_a, cur.fault_a
    return FaultPositions(pos, i_a, i_b, i_f)


def tower_earth_potential(cfg, geo, sources: LineSources, t_route, t_pos):
    """Earth potential and step voltage at each segment from a faulted tower.

    For every (segment, line) pair, the two towers of the line on either side of
    the segment's projection are faulted in turn. Each discharges
    ``share·|I_f(x)|``: the fault current from the source model at the tower
    (§8.1), the share from the earth-wire ladder with a footing of radius
    ``footing_radius_m`` in the segment's soil (§4.3), or the run's
    ``tower_current_share`` where it is above 0. The tower counts within its
    zone of influence, where its earth potential exceeds
    ``tower_zone_threshold_v`` (§4.5), and no farther than ``tower_zone_m``.

    Returns
    -------
    earth_potential_v, step_voltage_v : ndarray, per segment [V]
    """
    seg = geo.segments
    n_seg = len(seg)
    epr = np.zeros(n_seg)
    step = np.zeros(n_seg)
    pairs = geo.pairs
    if len(pairs) == 0 or len(t_route) == 0:
        return epr, step
    r0 = cfg.run.footing_radius_m
    fixed_share = float(cfg.run.tower_current_share)
    threshold = cfg.run.tower_zone_threshold_v
    cap = cfg.run.tower_zone_m
    span_default = cfg.run.tower_span_m
    feature = pairs.line
    route = sources.route[feature]
    x = sources.route_position(feature, pairs.line_position_m)
    rho = getattr(geo, "local_resistivity_ohm_m", geo.soil_resistivity_ohm_m)[pairs.segment]
    t_key = t_route * 1e9 + t_pos
    base = np.searchsorted(t_key, route * 1e9 + x)
    # per tower: fault current, span to its neighbours, ladders (1 at a route's end towers)
    cur = np.abs(sources.currents(t_route, t_pos).fault_a)
    same_prev = np.r_[False, t_route[1:] == t_route[:-1]]
    same_next = np.r_[t_route[:-1] == t_route[1:], False]
    gap_prev = np.where(same_prev, np.r_[0.0, np.diff(t_pos)], np.nan)
    gap_next = np.where(same_next, np.r_[np.diff(t_pos), 0.0], np.nan)
    with np.errstate(invalid="ignore"):
        span = np.nanmean(np.stack([gap_prev, gap_next]), axis=0)
    span = np.where(np.isfinite(span), span, span_default)
    ladders = same_prev.astype(int) + same_next.astype(int)
    # earth wire of the feature the tower sits on (a line may change tower type)
    ew = sources.earth_wire_ohm_per_m[sources.feature_at(t_route, t_pos)]
    for off in (-1, 0):
        k = np.clip(base + off, 0, len(t_route) - 1)
        same = t_route[k] == route
        ds = t_pos[k] - x
        r = np.hypot(pairs.separation_m, ds)
        if fixed_share > 0:
            share = np.full(len(k), fixed_share)
        else:
            rt = conductive.footing_resistance_ohm(rho, r0)
            share = conductive.tower_current_share(ew[k] * span[k], rt,
                                                   np.maximum(ladders[k], 1))
            share = np.where(ladders[k] == 0, 1.0, share)  # a lone tower
        i_tower = share * cur[k]
        zone = conductive.zone_of_influence_m(i_tower, rho, threshold)
        inside = same & (r <= np.minimum(zone, cap))
        v = np.abs(conductive.earth_potential_hemisphere(i_tower, rho, r, r0))
        vs = conductive.step_voltage_hemisphere(i_tower, rho, r, r0)
        np.maximum.at(epr, pairs.segment[inside], v[inside])
        np.maximum.at(step, pairs.segment[inside], vs[inside])
    return epr, step
