"""How each named step runs: read, compute the stages it needs, hand back tables.

The declarations (inputs, outputs, parameters) and :func:`run_step` are in
:mod:`corridor.steps.catalog`; this module holds the step bodies.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from corridor.errors import ConfigError, CorridorError


class StepCancelled(CorridorError):
    """The caller's ``cancel()`` returned true between two stages."""


@dataclass
class StepContext:
    """What a step's ``run`` gets: the config (with parameters applied) and hooks."""

    config: Any
    inputs: Mapping[str, Path]
    outputs_dir: Path
    progress: Callable[[float, str], None]
    cancel: Callable[[], bool]


def _check(ctx: StepContext, fraction: float, message: str) -> None:
    if ctx.cancel():
        raise StepCancelled(f"cancelled before {message}")
    ctx.progress(fraction, message)


def _read(ctx):
    from corridor.io.layers import read_inputs

    _check(ctx, 0.0, "read")
    return read_inputs(ctx.config)


_ASSET_ORDER = ("couple", "respond", "assess", "ground")


def _compute_through(ctx: StepContext, last: str | None, before_finalize=None):
    """Read and compute the per-asset stages up to ``last`` (None: geometry only).

    ``before_finalize(run)`` may add columns while the segment table is still
    in compute order (the order of the per-segment arrays on the run).
    """
    from corridor.compute import compute, finalize
    from corridor.steps import asset_stages

    inputs = _read(ctx)
    stages = {}
    wanted = _ASSET_ORDER[:_ASSET_ORDER.index(last) + 1] if last else ()
    all_stages = asset_stages()
    n = len(wanted) + 2
    for i, name in enumerate(wanted):
        fn = all_stages[name]

        def wrapped(run, fn=fn, i=i, name=name):
            _check(ctx, (i + 2) / n, name)
            fn(run)

        stages[name] = wrapped
    _check(ctx, 1 / n, "expose")
    from corridor.reconcile.model import calibrated_stages

    run = compute(ctx.config, inputs, calibrated_stages(ctx.config, stages))  # [calibration]
    if before_finalize is not None:
        before_finalize(run)
    return finalize(run, {})  # segment ids in run order, no run-wide stages


def _layers(run) -> dict:
    return {"exposures": run.exposure_table, "segments": run.segment_table}


def _run_read(ctx):
    inputs = _read(ctx)
    out = {"lines": inputs.lines, "assets": inputs.assets, "rejected": inputs.rejected.frame()}
    for role in ("soil", "grounds", "towers"):
        frame = getattr(inputs, role)
        if frame is not None:
            out[role] = frame
    return out, inputs.counts


def _run_segment(ctx):
    import geopandas as gpd
    import pandas as pd

    from corridor.geometry.segments import split_lines

    inputs = _read(ctx)
    _check(ctx, 0.5, "segment")
    seg = split_lines(inputs.assets.geometry.to_numpy(), ctx.config.run.segment_length_m)
    assets = inputs.assets
    frame = pd.DataFrame({
        "segment_id": np.arange(len(seg), dtype=np.int64),
        "asset_id": assets["asset_id"].to_numpy(dtype=object)[seg.feature],
        "asset_kind": assets["asset_kind"].to_numpy(dtype=object)[seg.feature],
        "part": seg.part,
        "segment_index": np.arange(len(seg)) - np.searchsorted(seg.feature, seg.feature),
        "chainage_m": seg.chainage_m,
        "length_m": seg.length_m,
    })
    layer = gpd.GeoDataFrame(frame, geometry=seg.geometries(), crs=inputs.crs)
    return {"segments": layer}, {"assets": len(assets), "segments": len(seg)}


def _run_expose(ctx):
    run = _compute_through(ctx, None)
    return _layers(run), dict(run.counts)


def _coupling_columns(run) -> None:
    t = run.segment_table
    cp = run.coupling
    emf_n = np.abs(cp.segment_emf_normal_v)
    emf_f = np.zeros(len(t))
    if len(cp.fault_seg):
        np.maximum.at(emf_f, cp.fault_seg, np.abs(cp.fault_emf_v))
    km = t["length_m"].to_numpy(float) / 1000.0
    t["emf_normal_v_per_km"] = emf_n / km
    t["emf_normal_v"] = emf_n
    t["emf_fault_v_per_km"] = emf_f / km
    t["emf_fault_v"] = emf_f
    t["fault_current_ka"] = cp.segment_fault_current_a / 1000.0
    t["earth_potential_fault_v"] = cp.earth_potential_fault_v
    t["i_capacitive_source_ma"] = np.abs(cp.capacitive_current_a) * 1000.0


def _run_couple(ctx):
    run = _compute_through(ctx, "couple", before_finalize=_coupling_columns)
    return {"segments": run.segment_table}, dict(run.counts)


def _run_respond(ctx):
    run = _compute_through(ctx, "respond")
    return {"segments": run.segment_table}, dict(run.counts)


def _saved_segments(ctx):
    import pyogrio

    path = Path(ctx.inputs["segments"])
    if not path.exists():
        raise ConfigError(f"--in segments={path}: file not found")
    layers = [str(x) for x in pyogrio.list_layers(path)[:, 0]]
    layer = "segments" if "segments" in layers else layers[0]
    try:
        return pyogrio.read_dataframe(path, layer=layer, use_arrow=True)
    except Exception as exc:  # GDAL's own errors; the file is the user's
        raise ConfigError(f"--in segments={path}: cannot read layer {layer!r}: {exc}") from None


_ASSESS_COLUMNS = ("asset_kind", "soil_resistivity_ohm_m", "clearing_time_s",
                   "high_reliability", "v_normal_v")


def _assess_saved(ctx, table):
    from corridor.steps.assess import assess
    from corridor.steps.columns import load_config_limit_set

    missing = [c for c in _ASSESS_COLUMNS if c not in table.columns]
    if missing:
        raise ConfigError(f"--in segments: the layer lacks {', '.join(missing)}; save it from"
                          " the respond step (or later)")
    limit_set = load_config_limit_set(ctx.config)
    cats = {}
    if "coating_type" in table.columns:
        cats["coating_type"] = table["coating_type"].fillna("").astype(str).to_numpy()
    table = table.copy()
    table["high_reliability"] = table["high_reliability"].fillna(False).astype(bool)
    res = assess(limit_set, table, cats)
    table["ac_density_a_per_m2"] = res["quantities"]["ac_density_a_per_m2"]
    for name, ratio in res["ratios"].items():
        table[f"ratio_{name}"] = ratio
    table["utilization"] = res["utilization"]
    table["governing"] = res["governing"]
    table["hazard_class"] = res["hazard_class"]
    return table, limit_set


def _run_assess(ctx):
    if "segments" in ctx.inputs:
        _check(ctx, 0.0, "read saved segments")
        t = _saved_segments(ctx)
        _check(ctx, 0.5, "assess")
        t, _ = _assess_saved(ctx, t)
        return {"segments": t}, {"segments": len(t),
                                 "segments_exceeding": int((t["utilization"] >= 1).sum())}
    run = _compute_through(ctx, "assess")
    return {"segments": run.segment_table}, dict(run.counts)


def _run_ground(ctx):
    run = _compute_through(ctx, "ground")
    sites = run.sites
    after = run.segment_table_after_grounding
    out = {"segments": after if after is not None else run.segment_table}
    if sites is not None:
        out["sites"] = sites
        out["grounding_sites"] = sites.drop(columns="geometry", errors="ignore")
    return out, dict(run.counts)


def _rank_table(t):
    from corridor.steps import rank_segments

    return t, {"segments_exceeding": rank_segments(t)}


def _run_rank(ctx):
    if "segments" in ctx.inputs:
        _check(ctx, 0.0, "read saved segments")
        t = _saved_segments(ctx)
        if "utilization" not in t.columns:
            _check(ctx, 0.3, "assess")
            t, _ = _assess_saved(ctx, t)
        _check(ctx, 0.7, "rank")
        t, counts = _rank_table(t.copy())
        return {"segments": t}, {"segments": len(t), **counts}
    run = _compute_through(ctx, "ground")
    _check(ctx, 0.95, "rank")
    from corridor.steps import stage_rank

    stage_rank(run)
    return {"segments": run.segment_table}, dict(run.counts)


def _run_report(ctx):
    from corridor.runner import publish
    from corridor.steps import asset_stages, run_stages

    _check(ctx, 0.0, "report")
    run = publish(ctx.config, ctx.outputs_dir, asset_stages(), run_stages())
    return {}, dict(run.counts)
