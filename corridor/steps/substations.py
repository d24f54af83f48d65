"""Earth potential rise around substations during an earth fault (docs/methods.md §18.4).

An optional substation layer gives points with the earth-fault current their
grounding grid discharges and the grid's resistance to remote earth. Each grid
is taken as the hemisphere of equal resistance in the soil of the asset
segment it is assessed at, radius r0 = ρ/(2πR_g). Its potential is then
V(r) = ρI/(2πr) beyond r0 and I·R_g inside, and its step voltage over 1 m is
ρI/(2π)·(1/r − 1/(r+1)) (IEEE Std 80, hemisphere electrode; §4.1, §4.6). This is
the tower model of :func:`corridor.steps.faultscan.tower_earth_potential`, with the
grid in place of a footing and the whole given current discharged.

A substation counts within its zone of influence, where its earth potential
exceeds ``run.tower_zone_threshold_v``, r = ρI/(2πV) (§4.5), and no farther than
``run.tower_zone_m``. It is assessed at each segment's closest point, the
conservative one. A substation fault and a tower fault are separate events, so
each segment keeps the larger earth potential and step voltage of the two.
Grounding sites within the zone are flagged (``in_tower_zone``) like those near a
tower, with the local earth potential in their after-voltage.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.physics import conductive

log = logging.getLogger(__name__)


@dataclass
class SubstationPotential:
    """Per segment: the largest substation earth potential and step voltage.

    Attributes
    ----------
    earth_potential_v : ndarray of float
        Largest earth potential at the segment from a substation in a fault [V].
    step_voltage_v : ndarray of float
        Largest 1 m step voltage there [V].
    clearing_time_s : ndarray of float
        Clearing time of the substation giving that earth potential (NaN: none).
    substation : ndarray of int
        Index of that substation in the layer (-1: none).
    """

    earth_potential_v: np.ndarray
    step_voltage_v: np.ndarray
    clearing_time_s: np.ndarray
    substation: np.ndarray


def _point_segment_distance_m(px, py, x0, y0, x1, y1):
    """Distance from one point to each straight segment [m]."""
    dx, dy = x1 - x0, y1 - y0
    ll = dx * dx + dy * dy
    t = np.where(ll > 0, ((px - x0) * dx + (py - y0) * dy) / np.where(ll > 0, ll, 1.0), 0.0)
    t = np.clip(t, 0.0, 1.0)
    return np.hypot(px - (x0 + t * dx), py - (y0 + t * dy))


def substation_earth_potential(cfg, inputs, geo) -> SubstationPotential:
    """Earth potential and step voltage at each asset segment from faulted substations.

    Parameters
    ----------
    cfg : corridor.config.Config
    inputs : corridor.io.layers.Inputs
        ``inputs.substations`` holds ``fault_current_ka``, ``grid_resistance_ohm`` and
        ``clearing_time_s`` per point (or is None: no substation layer).
    geo : corridor.pipeline.Geometry
        Asset segments and their local soil resistivity.

    Returns
    -------
    SubstationPotential
    """
    seg = geo.segments
    n_seg = len(seg)
    out = SubstationPotential(np.zeros(n_seg), np.zeros(n_seg), np.full(n_seg, np.nan),
                              np.full(n_seg, -1, np.int64))
    subs = getattr(inputs, "substations", None)
    if subs is None or len(subs) == 0 or n_seg == 0:
        return out
    rho = np.asarray(getattr(geo, "local_resistivity_ohm_m", geo.soil_resistivity_ohm_m),
                     float)
    threshold = float(cfg.run.tower_zone_threshold_v)
    cap = float(cfg.run.tower_zone_m)
    current = subs["fault_current_ka"].to_numpy(float) * 1000.0
    r_grid = subs["grid_resistance_ohm"].to_numpy(float)
    clearing = subs["clearing_time_s"].to_numpy(float)
    xs = subs.geometry.x.to_numpy()
    ys = subs.geometry.y.to_numpy()
    for k in range(len(subs)):
        # candidates: segments whose bounding box is within the cap
        near = ((np.minimum(seg.x0_m, seg.x1_m) <= xs[k] + cap)
                & (np.maximum(seg.x0_m, seg.x1_m) >= xs[k] - cap)
                & (np.minimum(seg.y0_m, seg.y1_m) <= ys[k] + cap)
                & (np.maximum(seg.y0_m, seg.y1_m) >= ys[k] - cap))
        idx = np.flatnonzero(near)
        if len(idx) == 0:
            continue
        r = _point_segment_distance_m(xs[k], ys[k], seg.x0_m[idx], seg.y0_m[idx],
                                      seg.x1_m[idx], seg.y1_m[idx])
        rho_k = rho[idx]
        r0 = rho_k / (2.0 * np.pi * r_grid[k])  # hemisphere of resistance R_g
        zone = conductive.zone_of_influence_m(current[k], rho_k, threshold)
        inside = r <= np.minimum(zone, cap)
        if not inside.any():
            continue
        v = np.abs(conductive.earth_potential_hemisphere(current[k], rho_k, r, r0))
        vs = conductive.step_voltage_hemisphere(current[k], rho_k, r, r0)
        v = np.where(inside, v, 0.0)
        vs = np.where(inside, vs, 0.0)
        better = v > out.earth_potential_v[idx]
        hit = idx[better]
        out.earth_potential_v[hit] = v[better]
        out.clearing_time_s[hit] = clearing[k]
        out.substation[hit] = k
        out.step_voltage_v[idx] = np.maximum(out.step_voltage_v[idx], vs)
    n_hit = int((out.substation >= 0).sum())
    if n_hit:
        log.info("substations: %d asset segments within a substation's zone of influence",
                 n_hit)
    return out
