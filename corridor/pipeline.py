"""The screening run: the one sequence every entry point calls.

:func:`screen` is the sequence of a run::

    read_inputs   io/layers.py: every layer, checked; rejected features listed
    asset_keys    keys.py: what each asset's results depend on, hashed
    plan          cache.py (unchanged assets from the cache) and partitions.py
                  (partitions of whole assets: consecutive assets locally,
                  Hilbert order on dask)
    compute       backends/ run compute.compute() on each partition: segment
                  geometry, then the per-asset steps (couple, respond,
                  assess, ground in steps/)
    merge         partitions.merge: rows in full-run order, ids renumbered
    finalize      compute.finalize(): segment ids, the run-wide steps (rank,
                  summary layers)
    compare       changes.py: changes.csv against the previous run

The CLI and the step catalog reach it through :func:`corridor.runner.publish`
(lock, staging folder, writing through :mod:`corridor.io.write`, publish);
the cache (:func:`corridor.cache.incremental_compute`) and both backends
(:mod:`corridor.backends`) call :func:`corridor.compute.compute` on pieces of
whole assets (:func:`corridor.compute.subset_inputs`) and
:func:`corridor.partitions.merge` to put them together. Per-asset stages
(segment geometry, then couple, respond, assess, ground in
:mod:`corridor.steps`) run inside
:func:`corridor.compute.compute`; run-wide stages (rank, summary tables) in
:func:`corridor.compute.finalize`. The typed
result that the outputs are written from is :class:`corridor.result.Result`.

Nothing here does physics itself: it turns
tables into arrays for :mod:`corridor.physics`, :mod:`corridor.network` and
:mod:`corridor.limits`, and writes their answers back into tables.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

from corridor.compute import Run, compute, finalize
from corridor.compute import (
    exposure_frame as exposure_frame,
)
from corridor.compute import (
    limits_frame as limits_frame,
)
from corridor.compute import (
    segment_frame as segment_frame,
)
from corridor.compute import (
    stage_geometry as stage_geometry,
)
from corridor.compute import (
    subset_inputs as subset_inputs,
)
from corridor.compute import (
    versions as versions,
)
from corridor.config import Config
from corridor.io.layers import read_inputs
from corridor.schema import SAFETY_DEFAULT_FIELDS

log = logging.getLogger(__name__)


def run_screening(cfg: Config, stages: dict | None = None,
                  final_stages: dict | None = None) -> Run:
    """Read, compute every asset, finalize (no writing)."""
    from corridor.reconcile.model import calibrated_stages
    from corridor.reconcile.run import attach as attach_readings

    t0 = time.perf_counter()
    inputs = read_inputs(cfg)
    read_s = round(time.perf_counter() - t0, 4)
    run = compute(cfg, inputs, calibrated_stages(cfg, stages))
    run.timings_s = {"read": read_s, **run.timings_s}
    finalize(run, final_stages)
    attach_readings(run)  # [readings]: readings layer, reconciliation.csv (docs/methods.md §17)
    return run


# -- the one sequence: read -> plan partitions -> compute -> merge -> finalize -> compare

def cache_folder(cfg: Config, out_dir: Path) -> Path | None:
    """The cache folder of a run (``run.cache_dir``), or None for no cache."""
    value = str(cfg.run.cache_dir)
    if value == "":
        return None
    if value == "auto":
        return out_dir.parent / f"{out_dir.name}.cache"
    return (cfg.path.parent / value).resolve()


#: Fields whose filled-in defaults run.json lists by feature id (safety relevant).
DEFAULT_IDS_LISTED = SAFETY_DEFAULT_FIELDS


def _row_role(row: dict, cfg: Config, asset_labels: set[str]) -> str:
    role = row.get("role")
    if role:
        return "power_lines" if role == "power_lines" else (
            "assets" if role == "assets" else "other")
    if row.get("layer") == cfg.power_lines.label:
        return "power_lines"
    return "assets" if row.get("layer") in asset_labels else "other"


def rejected_summary(cfg: Config, inputs) -> dict:
    """Rejected features of a run split by role.

    Returns
    -------
    dict
        ``counts``: ``rejected_power_lines``, ``rejected_assets``,
        ``rejected_other`` (features, each counted once); ``power_lines``:
        ``[{"line_id", "field", "reason"}]`` for run.json; ``assets`` and
        ``other``: the rejected rows of those roles.
    """
    asset_labels = {a.label for a in cfg.assets}
    parts: dict[str, list[dict]] = {"power_lines": [], "assets": [], "other": []}
    for row in inputs.rejected.rows:
        parts[_row_role(row, cfg, asset_labels)].append(row)

    def features(rows):
        return len({(r.get("layer"), r.get("feature_id")) for r in rows})

    return {"counts": {"rejected_power_lines": features(parts["power_lines"]),
                       "rejected_assets": features(parts["assets"]),
                       "rejected_other": features(parts["other"])},
            "power_lines": [{"line_id": str(r["feature_id"]), "field": str(r["field"]),
                             "reason": str(r["reason"])} for r in parts["power_lines"]],
            "assets": parts["assets"], "other": parts["other"]}


def defaults_used_record(inputs) -> dict:
    """run.json's ``defaults_used``: field -> count, with ids for the safety-relevant fields."""
    used = getattr(inputs, "defaults_used", None) or {}
    out = {}
    for fld, ids in sorted(used.items()):
        ids = [str(i) for i in ids]
        entry: dict = {"count": len(ids)}
        if fld in DEFAULT_IDS_LISTED:
            entry["ids"] = ids
        out[fld] = entry
    return out


def side_input_problems(cfg: Config, inputs) -> list[str]:
    """Problems of the inputs used late in a run: ``[load_series]``, ``[readings]`` and
    the soil polygons ``[uncertainty]`` names.

    The load series is used by the per-asset series step, the readings after the
    run-wide steps and the polygon ids by the ensemble step, so a bad file or id
    would fail a large run only during or after its computation, and ``corridor
    check`` would not see it. Checked here with the code the run uses, right after
    the layers: each problem names the file (and layer) and the field or key. The
    load series is kept in the process's cache of read series, so it is not read
    twice.

    Returns
    -------
    list of str
        Every problem found; empty when each is usable or not configured.
    """
    from corridor.errors import CorridorError

    problems: list[str] = []
    if getattr(cfg, "load_series", None) is not None:
        from corridor.series.stage import load_series_of

        try:
            load_series_of(cfg, inputs.lines)
        except CorridorError as exc:
            problems.extend(getattr(exc, "problems", [str(exc)]))
    settings = getattr(cfg, "readings", None)
    if settings:
        from corridor.reconcile import readings as rd

        try:
            rd.read_table(settings, inputs.crs)
        except CorridorError as exc:
            problems.extend(getattr(exc, "problems", [str(exc)]))
    bands = getattr(cfg, "uncertainty", None)
    if bands is not None and bands.soil_polygons:
        from corridor.uncertainty.ensemble import polygon_rows

        problems.extend(polygon_rows(cfg, inputs.soil, bands)[1])
    return problems


def screen(cfg: Config, out_dir: Path, stages: dict | None = None,
           final_stages: dict | None = None, ranked=None) -> Run:
    """Read, compute (incrementally when a cache is configured), finalize, compare.

    ``ranked`` is passed to :func:`corridor.compute.finalize`.
    """
    from corridor import backends, progress
    from corridor import cache as cache_mod
    from corridor import changes as changes_mod
    from corridor import keys as keys_mod
    from corridor.io.layers import read_inputs
    from corridor.reconcile.model import calibrated_stages
    from corridor.reconcile.run import attach as attach_readings

    stages = calibrated_stages(cfg, stages)  # [calibration]: factors applied (docs/methods.md §17)
    compute_fn = backends.compute_function(cfg, out_dir.parent)
    total = 5
    progress.stage("read", 1, total)
    t0 = time.perf_counter()
    inputs = read_inputs(cfg)
    read_s = round(time.perf_counter() - t0, 4)
    rejected = rejected_summary(cfg, inputs)
    side = side_input_problems(cfg, inputs)  # before the computation, not after it
    if side:
        from corridor.errors import InputError

        raise InputError(side)
    if len(inputs.assets) == 0:
        from corridor.errors import InputError

        raise InputError(["asset layers: no usable asset features; every one was rejected:"]
                         + [f"layer {r['layer']}: feature {r['feature_id']}: field"
                            f" '{r['field']}': {r['reason']}" for r in inputs.rejected.rows])
    progress.stage("compute", 2, total)
    t1 = time.perf_counter()
    keys = keys_mod.asset_keys(cfg, inputs)
    hash_s = round(time.perf_counter() - t1, 4)
    folder = cache_folder(cfg, out_dir)
    if folder is not None:
        with cache_mod.locked(folder) as usable:  # None: cache unusable, warned
            run = backends.incremental_compute(cache_mod, cfg, inputs, stages, usable, keys,
                                               compute_fn)
    else:
        run = compute_fn(cfg, inputs, stages)
        run.counts["assets_recomputed"] = len(inputs.assets)
        run.counts["assets_from_cache"] = 0
    run.timings_s = {"read": read_s, "hash": hash_s, **run.timings_s}
    run.counts.update(rejected["counts"])
    progress.stage("finalize", 3, total)
    finalize(run, final_stages, ranked=ranked)
    attach_readings(run)  # [readings]: readings layer, reconciliation.csv
    run.counts["assets_recomputed"] = int(run.counts.get("assets_recomputed", 0))
    progress.stage("compare", 4, total)
    state = changes_mod.inputs_state(run, keys)
    previous = changes_mod.read_previous(out_dir)
    frame, summary = changes_mod.compare(run, keys, state, previous,
                                         float(cfg.run.change_threshold))
    run.changes = frame
    run.record.update({"changes": summary, "inputs_state": state,
                       "rejected_power_lines": rejected["power_lines"],
                       "defaults_used": defaults_used_record(inputs)})
    progress.stage("write", 5, total)
    return run


