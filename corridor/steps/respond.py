"""Response stage: voltage and current along every asset from its EMF.

Each asset part is a chain of its segments (a lossy earth-return
transmission line, :mod:`corridor.network.response`). All chains of the run
go into one batched tridiagonal system, factorised once and solved for:

- column 0: the normal-load EMF;
- column 1: the capacitive (electric-field) currents injected at the nodes,
  no EMF — the voltage a high-impedance voltmeter would read;
- earth faults: every fault case (asset, faulted line) is scanned over its
  fault positions by superposition of band responses on the same factors
  (:func:`corridor.network.fault_scan.scan_fault_positions`, docs/methods.md
  §8.2); per segment the worst voltage over positions and cases is kept.

Per kind (defaults in :mod:`corridor.schema`, adapters in :mod:`corridor.kinds`,
models in :mod:`corridor.network.asset_models`):

- pipeline: coating leakage πD/r_coat (+ jωC), steel internal impedance
  with μr, earth-return self impedance at the surface (a pipe 1–2 m deep is
  treated as lying on the surface, common practice);
- fence: metal posts leak at every post (1/(R_post·spacing)); wooden posts
  only through the fence's capacitance and at grounds from the grounds layer;
- rail: track series impedance from the rail equivalent conductor and the
  ballast resistance;
- telecom: the pair against earth, EMF scaled by the sheath screening
  factor, terminations from where the pair is grounded.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from corridor.errors import ConfigError
from corridor.kinds import KindSegments, asset_column
from corridor.network import asset_models
from corridor.network.fault_scan import scan_fault_positions
from corridor.network.response import ChainBatch, ChainSystem
from corridor.physics._arrays import complex_bincount
from corridor.registry import registry

log = logging.getLogger(__name__)

@dataclass
class Response:
    """Per-segment results of the asset-response solve."""

    v_normal_v: np.ndarray
    i_normal_a: np.ndarray
    v_fault_v: np.ndarray  # worst over fault cases and positions
    i_fault_a: np.ndarray
    fault_case_of_segment: np.ndarray  # governing fault case per segment (-1: none)
    fault_position_m: np.ndarray  # governing fault's chainage along its line (NaN: none)
    emf_fault_v: np.ndarray  # |segment EMF| in the governing fault
    v_capacitive_open_v: np.ndarray
    i_capacitive_short_ma: np.ndarray
    i_capacitive_body_ma: np.ndarray
    capacitive_source_impedance_ohm: np.ndarray
    i_normal_body_ma: np.ndarray
    normal_source_impedance_ohm: np.ndarray
    emf_section_normal_v: np.ndarray
    emf_section_fault_v: np.ndarray
    node_voltage_normal_v: np.ndarray
    node_voltage_fault_v: np.ndarray  # per node: worst |V| over fault cases and positions
    chain_start: np.ndarray
    system: ChainSystem
    segment_emf_normal_v: np.ndarray  # complex, screened, per segment (chain direction)
    node_shunt_s: np.ndarray
    rejected: list
    fault_source_impedance_ohm: np.ndarray  # |Z_th| at the chain's fault peak, per segment
    touch_loading: np.ndarray  # R_body/|R_body + Z_th|, per segment
    node_voltage_all_v: np.ndarray  # (n_nodes, 3): normal, capacitive, worst fault |V|
    chain_of_segment: np.ndarray
    segments: np.ndarray  # global segment index of each row
    nodes: np.ndarray  # global node index of each node row
    model: ResponseModel


def chain_layout(seg) -> np.ndarray:
    """First segment of each chain: one chain per (asset, part)."""
    if len(seg) == 0:
        return np.zeros(0, np.int64)
    change = np.r_[True, (seg.feature[1:] != seg.feature[:-1]) | (seg.part[1:] != seg.part[:-1])]
    return np.flatnonzero(change)


#: Per-asset values of an attribute (missing or NaN take the default).
_col = asset_column


def line_constants(cfg, assets, seg, soil_ohm_m, soil_layers=None):
    """Series impedance and shunt admittance of every segment.

    Each kind's segments go to the kind's model in the registry
    (:attr:`corridor.kinds.AssetKind.line_constants`), which gets a
    :class:`corridor.kinds.KindSegments` and returns z [Ω/m], y [S/m] and
    optionally an EMF scale factor [-].

    Returns
    -------
    z_ohm_per_m, y_s_per_m : ndarray of complex, per segment
    emf_scale : ndarray, per segment (sheath screening factor for telecom, else 1)
    """
    f = cfg.run.frequency_hz
    kind = assets["asset_kind"].to_numpy(dtype=object)[seg.feature]
    n = len(seg)
    z = np.zeros(n, complex)
    y = np.zeros(n, complex)
    scale = np.ones(n)
    a = seg.feature
    h = _col(assets, "height_m", 0.0)[a]
    present = set(kind.tolist())
    unknown = present.difference(registry.kind_names())
    if unknown:
        raise ConfigError(f"asset kinds without a registered model: {', '.join(sorted(unknown))}")
    for name in registry.kind_names():
        if name not in present:
            continue
        sel = kind == name
        layers = ({k: np.asarray(v, float)[sel] for k, v in soil_layers.items()}
                  if soil_layers else None)
        out = registry.kind(name).line_constants(KindSegments(
            kind=name, frequency_hz=f, soil_resistivity_ohm_m=soil_ohm_m[sel],
            height_m=h[sel], assets=assets, feature=a[sel], soil_layers=layers))
        if len(out) not in (2, 3):
            raise ConfigError(f"line-constant model of {name!r}: expected (z, y) or"
                              f" (z, y, emf_scale), got {len(out)} values")
        z[sel] = out[0]
        y[sel] = out[1]
        if len(out) == 3:
            scale[sel] = out[2]
    return z, y, scale


def terminations(assets, seg, chain_start, z, y):
    """Start and end termination admittances of every chain [S]."""
    feat = seg.feature[chain_start]
    kind = assets["asset_kind"].to_numpy(dtype=object)[feat]
    start = _col(assets, "start_termination", "open")[feat].astype(object)
    end = _col(assets, "end_termination", "open")[feat].astype(object)
    for k in registry.kinds():
        # a kind whose terminations follow an attribute (telecom: cable_grounding)
        if k.grounding_terminations is None or k.grounding_terminations[0] not in assets:
            continue
        column, table = k.grounding_terminations
        values = assets[column].to_numpy(dtype=object)[feat]
        for label, (s_lab, e_lab) in table.items():
            hit = (kind == k.name) & (values == label)
            start[hit] = s_lab
            end[hit] = e_lab
    r = _col(assets, "termination_resistance_ohm", 10.0)[feat]
    chain_end = np.r_[chain_start[1:], len(seg)] - 1
    y_start = asset_models.termination_admittance(start.astype(str), z[chain_start],
                                                  y[chain_start], r)
    y_end = asset_models.termination_admittance(end.astype(str), z[chain_end], y[chain_end], r)
    return y_start, y_end


def place_items(inputs, seg, chain_start, tolerance_m):
    """Snap grounds and series breaks to the asset chains.

    Returns
    -------
    node_shunt_s : ndarray of complex, per node
    segment_break : ndarray of bool, per segment
    rejected : list of (feature_id, field, reason)
    """
    n_nodes = len(seg) + len(chain_start)
    node_shunt = np.zeros(n_nodes, complex)
    brk = np.zeros(len(seg), bool)
    rejected: list[tuple[str, str, str]] = []
    g = inputs.grounds
    if g is None or len(g) == 0:
        return node_shunt, brk, rejected
    ids = {v: i for i, v in enumerate(inputs.assets["asset_id"])}
    chain_of_seg = np.repeat(np.arange(len(chain_start)),
                             np.diff(np.r_[chain_start, len(seg)]))
    first_seg = np.searchsorted(seg.feature, np.arange(len(inputs.assets)), side="left")
    last_seg = np.searchsorted(seg.feature, np.arange(len(inputs.assets)), side="right")
    for row in g.itertuples(index=False):
        a = ids.get(row.asset_id)
        if a is None:
            rejected.append((row.feature_id, "asset_id",
                             f"asset {row.asset_id!r} is not among the screened assets"))
            continue
        lo, hi = first_seg[a], last_seg[a]
        x0 = seg.x0_m[lo:hi]
        y0 = seg.y0_m[lo:hi]
        x1 = seg.x1_m[lo:hi]
        y1 = seg.y1_m[lo:hi]
        px, py = row.geometry.x, row.geometry.y
        dx, dy = x1 - x0, y1 - y0
        t = np.clip(((px - x0) * dx + (py - y0) * dy) / np.maximum(dx * dx + dy * dy, 1e-12),
                    0, 1)
        d = np.hypot(px - (x0 + t * dx), py - (y0 + t * dy))
        k = int(np.argmin(d))
        if d[k] > tolerance_m:
            rejected.append((row.feature_id, "geometry",
                             f"{d[k]:.0f} m from asset {row.asset_id!r} (more than"
                             f" {tolerance_m:.0f} m)"))
            continue
        s = lo + k
        if row.item == "ground":
            node = s + chain_of_seg[s] + (1 if t[k] >= 0.5 else 0)
            node_shunt[node] += 1.0 / float(row.resistance_ohm)
        else:
            brk[s] = True
    return node_shunt, brk, rejected


#: Body resistance used to load a touch: IEEE Std 80-2013 clause 7.1 takes 1000 Ω
#: (from memory). A high-impedance source (a floating fence) cannot hold its
#: open-circuit voltage across a body; a low-impedance one (a pipeline) can.
BODY_RESISTANCE_OHM = 1000.0


@dataclass
class ResponseModel:
    """Everything the solve needs, built once; solved whole or for a subset of assets."""

    segment_length_m: np.ndarray
    z_ohm_per_m: np.ndarray
    y_s_per_m: np.ndarray
    segment_break: np.ndarray
    feature: np.ndarray  # asset of each segment
    chain_start: np.ndarray
    chain_of_segment: np.ndarray
    y_start_s: np.ndarray  # per chain
    y_end_s: np.ndarray
    node_shunt_s: np.ndarray  # per node: existing grounds
    rhs_v: np.ndarray  # (n_segments, 2 + n_normal_slots) segment EMF: normal, capacitive
    injection_a: np.ndarray  # (n_nodes,) node currents of the capacitive case (column 1)
    rejected: list
    # fault scan (docs/methods.md §8.2): sections, sorted by segment, and cases
    fault_section_segment: np.ndarray
    fault_section_case: np.ndarray
    fault_section_position_m: np.ndarray
    fault_section_emf_v_per_a: np.ndarray  # screened, telecom sheath factor applied
    fault_case_asset: np.ndarray
    fault_positions_m: np.ndarray  # (n_case, n_max)
    fault_current_start_a: np.ndarray
    fault_current_end_a: np.ndarray
    #: Normal-load components of unknown relative angle (one column each, after the
    #: normal and capacitive columns): the worst voltage is the sum of their magnitudes.
    n_normal_slots: int = 0
    #: EMF factor of each segment's asset kind (telecom sheath screening factor; 1 else),
    #: for callers that build their own right-hand sides (the load series, docs/methods.md §15).
    emf_scale: np.ndarray | None = None

    def subset(self, assets: np.ndarray | None):
        """Global segment and node indices of the chains of ``assets`` (None: all)."""
        n_seg = len(self.feature)
        n_chain = len(self.chain_start)
        if assets is None:
            return np.arange(n_seg), np.arange(n_seg + n_chain), np.arange(n_chain)
        keep_seg = np.isin(self.feature, assets)
        seg = np.flatnonzero(keep_seg)
        chains = np.unique(self.chain_of_segment[seg])
        first_node = self.chain_start[chains] + chains
        n_nodes = np.diff(np.r_[self.chain_start, n_seg])[chains] + 1
        rep = np.repeat(np.arange(len(chains)), n_nodes)
        nodes = first_node[rep] + (np.arange(len(rep)) - np.repeat(np.cumsum(n_nodes) - n_nodes,
                                                                   n_nodes))
        return seg, nodes, chains


def build_model(cfg, inputs, geo, coup) -> ResponseModel:
    """Line constants, terminations, grounds, breaks, right-hand sides and scan inputs."""
    seg = geo.segments
    n_seg = len(seg)
    chain_start = chain_layout(seg)
    layers = None
    bottom = getattr(geo, "soil_bottom_resistivity_ohm_m", None)
    thick = getattr(geo, "soil_top_thickness_m", None)
    if bottom is not None and thick is not None and np.isfinite(bottom).any():
        layers = {"bottom_resistivity_ohm_m": bottom, "top_thickness_m": thick}
    z, y, scale = line_constants(cfg, inputs.assets, seg, geo.soil_resistivity_ohm_m, layers)
    y_start, y_end = terminations(inputs.assets, seg, chain_start, z, y)
    node_shunt, brk, rejected = place_items(inputs, seg, chain_start,
                                            max(cfg.run.segment_length_m, 25.0))
    n_chain = len(chain_start)
    chain_of_seg = np.repeat(np.arange(n_chain), np.diff(np.r_[chain_start, n_seg]))
    start_node = np.arange(n_seg) + chain_of_seg
    slot = getattr(coup, "normal_component_slot", None)
    n_slot = int(slot.max()) + 1 if slot is not None and len(slot) else 0
    rhs = np.zeros((n_seg, 2 + n_slot), complex)
    rhs[:, 0] = coup.segment_emf_normal_v * scale
    if n_slot and slot is not None:  # (n_slot > 0 only with a slot array)
        comp_seg = coup.normal_component_segment
        flat = comp_seg * rhs.shape[1] + 2 + slot  # (segment, slot) pairs, summed if repeated
        rhs += complex_bincount(flat, coup.normal_component_emf_v * scale[comp_seg],
                                rhs.size).reshape(rhs.shape)
    inj = np.zeros(n_seg + n_chain, complex)
    half = 0.5 * coup.capacitive_current_a
    inj[start_node] += half  # one segment starts at a node ...
    inj[start_node + 1] += half  # ... and one ends at it: no index repeats
    order = np.argsort(coup.fault_section_segment, kind="stable")
    sec_seg = coup.fault_section_segment[order]
    pos = coup.fault_positions
    return ResponseModel(seg.length_m, z, y, brk, seg.feature, chain_start, chain_of_seg,
                         y_start, y_end, node_shunt, rhs, inj, rejected, sec_seg,
                         coup.fault_section_case[order], coup.fault_section_position_m[order],
                         coup.fault_section_emf_v_per_a[order] * scale[sec_seg],
                         coup.fault_case_asset, pos.position_m, pos.current_start_a,
                         pos.current_end_a, n_slot, scale)


def respond(cfg, inputs, geo, coup, extra_node_shunt_s=None) -> Response:
    """Solve every asset for the normal, capacitive and fault cases."""
    model = build_model(cfg, inputs, geo, coup)
    return solve_model(model, None, extra_node_shunt_s)


def solve_model(model: ResponseModel, assets=None, extra_node_shunt_s=None) -> Response:
    """Solve the chains of ``assets`` (None: all) with optional extra grounds.

    Parameters
    ----------
    model : ResponseModel
    assets : ndarray of int, optional
        Asset indices to solve; their chains are solved whole.
    extra_node_shunt_s : ndarray of complex, per global node, optional
        Extra grounds [S] (the grounding design adds its sites here).

    Returns
    -------
    Response
        Arrays per selected segment (``segments`` holds their global
        indices) and per selected node (``nodes``).
    """
    seg_idx, node_idx, chains = model.subset(assets)
    n_seg = len(seg_idx)
    if assets is None:
        chain_start = model.chain_start
        chain_of_seg = model.chain_of_segment
    else:
        counts = np.diff(np.r_[model.chain_start, len(model.feature)])[chains]
        chain_start = np.cumsum(counts) - counts
        chain_of_seg = np.repeat(np.arange(len(chains)), counts)
    whole = assets is None

    def part(values, index):  # no copy when the whole model is solved
        return values if whole else values[index]

    node_shunt = part(model.node_shunt_s, node_idx)
    if extra_node_shunt_s is not None:
        node_shunt = node_shunt + part(extra_node_shunt_s, node_idx)
    batch = ChainBatch.from_arrays(part(model.segment_length_m, seg_idx),
                                   part(model.z_ohm_per_m, seg_idx),
                                   part(model.y_s_per_m, seg_idx), chain_start, node_shunt,
                                   part(model.segment_break, seg_idx),
                                   part(model.y_start_s, chains), part(model.y_end_s, chains))
    system = ChainSystem(batch)
    rhs = part(model.rhs_v, seg_idx)
    slots = 2 + np.arange(model.n_normal_slots)
    # normal (as given) and capacitive in full; the normal components as Σ |.|
    node_current = np.zeros((len(node_idx), rhs.shape[1]), complex)
    node_current[:, 1] = part(model.injection_a, node_idx)
    sol = system.solve(rhs, node_current, sum_from=2)
    summed = sol.summed
    assert summed is not None  # asked for with sum_from

    v_n = sol.segment_voltage_v[:, 0]
    i_n = sol.segment_current_a[:, 0]
    normal_node_v = sol.node_voltage_v[:, 0]
    if len(slots):
        # worst case over the components' unknown relative angles: Σ |V_j| per node
        # (docs/methods.md §8); currents likewise at each segment end
        normal_node_v = summed.node_voltage_v
        first = np.arange(n_seg) + chain_of_seg
        v_n = np.maximum(normal_node_v[first], normal_node_v[first + 1])
        i_n = np.maximum(summed.segment_current_start_a, summed.segment_current_end_a)
    v_cap = sol.segment_voltage_v[:, 1]
    # earth faults: every case over its fault positions (docs/methods.md §8.2)
    sec = model.fault_section_segment
    take: slice | np.ndarray
    if whole:
        take = slice(None)
        local = sec
    else:
        take = np.isin(sec, seg_idx)
        local = np.searchsorted(seg_idx, sec[take])
    scan = scan_fault_positions(
        system, local, model.fault_section_case[take], model.fault_section_position_m[take],
        model.fault_section_emf_v_per_a[take], model.fault_positions_m,
        model.fault_current_start_a, model.fault_current_end_a)
    v_f = scan.segment_voltage_v
    i_f = scan.segment_current_a
    case_of_seg = scan.segment_case
    has = case_of_seg >= 0
    pos_m = np.full(n_seg, np.nan)
    if has.any():
        pos_m[has] = model.fault_positions_m[case_of_seg[has], scan.segment_position[has]]

    # source impedance at each chain's peak (normal, capacitive, fault), one solve
    # (a chain no fault reaches peaks at its first node, whatever else is in the run,
    # so results stay independent of the other assets)
    peaks = [system.peak_node(normal_node_v),
             system.peak_node(sol.node_voltage_v[:, 1]),
             system.peak_node(scan.chain_node_voltage_v)]
    zth = system.thevenin_impedance(np.stack(peaks, axis=1))
    zth_n = zth[:, 0][chain_of_seg]
    zth_c = zth[:, 1][chain_of_seg]
    zth_f = zth[:, 2][chain_of_seg]
    zn, zc = np.abs(zth_n), np.abs(zth_c)
    loading = BODY_RESISTANCE_OHM / np.abs(BODY_RESISTANCE_OHM + zth_f)
    # steady-state current through a 1000 ohm body touching the segment
    i_body_n = v_n / np.abs(BODY_RESISTANCE_OHM + zth_n) * 1000.0
    i_avail_c = np.where(zc > 0, v_cap / np.where(zc > 0, zc, 1.0), 0.0) * 1000.0
    i_body_c = v_cap / np.abs(BODY_RESISTANCE_OHM + zth_c) * 1000.0

    # longitudinal EMF of each chain (telecom ITU-T check): |sum of segment EMF|
    def chain_sum(values):
        re = np.add.reduceat(values.real, chain_start, axis=0)
        im = np.add.reduceat(values.imag, chain_start, axis=0)
        return np.abs(re + 1j * im)

    if n_seg:
        emf_sec_n = (chain_sum(rhs[:, slots]).sum(axis=1)[chain_of_seg] if len(slots)
                     else chain_sum(rhs[:, 0])[chain_of_seg])
        emf_sec_f = scan.chain_emf_v[chain_of_seg]
    else:
        emf_sec_n = emf_sec_f = np.zeros(0)
    node_all = np.column_stack([sol.node_voltage_v[:, :2], scan.node_voltage_worst_v])
    return Response(
        v_normal_v=v_n, i_normal_a=i_n, v_fault_v=v_f, i_fault_a=i_f,
        fault_case_of_segment=case_of_seg, fault_position_m=pos_m,
        emf_fault_v=np.abs(scan.segment_worst_emf_v),
        v_capacitive_open_v=v_cap, i_capacitive_short_ma=i_avail_c,
        i_capacitive_body_ma=i_body_c,
        capacitive_source_impedance_ohm=zc, i_normal_body_ma=i_body_n,
        normal_source_impedance_ohm=zn,
        emf_section_normal_v=emf_sec_n, emf_section_fault_v=emf_sec_f,
        node_voltage_normal_v=sol.node_voltage_v[:, 0],
        node_voltage_fault_v=scan.node_voltage_worst_v,
        chain_start=chain_start, system=system, segment_emf_normal_v=rhs[:, 0],
        node_shunt_s=node_shunt, rejected=model.rejected,
        fault_source_impedance_ohm=np.abs(zth_f), touch_loading=loading,
        node_voltage_all_v=node_all, chain_of_segment=chain_of_seg,
        segments=seg_idx, nodes=node_idx, model=model)


__all__ = ["Response", "ResponseModel", "build_model", "solve_model", "respond", "chain_layout",
           "line_constants", "place_items", "terminations"]
