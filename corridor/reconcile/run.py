"""The readings in a screening run, and ``corridor calibrate``.

:func:`attach` (called by :func:`corridor.pipeline.screen` when the config has
``[readings]``) compares every reading with the run's own voltages and adds

- the ``readings`` layer of ``screening.gpkg`` (one point per reading, every
  reading listed, placed or not, with its status and reason);
- ``reconciliation.csv`` (the same rows without geometry) and
  ``reconciliation_assets.csv`` (bias, spread and count per asset);
- ``readings`` in run.json (counts and the per-asset summary).

:func:`calibrate` fits the factors (:mod:`corridor.reconcile.fit`) and writes
the calibration file a calibrated run reads (``[calibration] path``), with a CSV
of the readings before and after the fit beside it.
"""

from __future__ import annotations

import hashlib
import json
import logging
from datetime import UTC, datetime
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from corridor.reconcile import compare as cmp
from corridor.reconcile import readings as rd
from corridor.reconcile.settings import CALIBRATION_FORMAT

log = logging.getLogger(__name__)

#: Columns of ``reconciliation.csv`` (and of the ``readings`` layer, with geometry).
COLUMNS = ["reading_id", "measured_at", "asset_id", "segment_index", "chainage_m",
           "snap_distance_m", "measured_v", "predicted_v", "ratio", "log_residual",
           "current_basis", "measured_ac_density_a_per_m2", "predicted_ac_density_a_per_m2",
           "density_ratio", "calibrated", "anomaly", "likely_cause", "status", "reason"]


def _near_joint_m(cfg) -> float:
    return 2.0 * float(cfg.run.segment_length_m)


def attach(run) -> None:
    """Compare the readings of ``[readings]`` with the finished run's voltages.

    Adds ``layer:readings``, ``csv:reconciliation.csv`` and
    ``csv:reconciliation_assets.csv`` to ``run.extra_tables`` and ``readings`` to
    ``run.record``. Nothing happens without ``[readings]``.
    """
    cfg = run.config
    settings = getattr(cfg, "readings", None)
    if not settings:
        return
    if run.segment_table is None or "v_normal_v" not in run.segment_table:
        log.warning("readings: this run computed no normal-load voltages (no response"
                    " step); the readings are not compared")
        return
    table = rd.read_table(settings, run.inputs.crs)
    placed = rd.place(table, run.segment_table, settings)
    compared = cmp.compare(placed, run.segment_table, run.inputs.lines)
    breaks = cmp.break_chainages(run.inputs, run.segment_table)
    cal = getattr(cfg, "calibration", None) or {}
    factors = cal.get("factors", {})
    flagged = cmp.flag_anomalies(compared, float(settings["anomaly_log_residual"]), breaks,
                                 _near_joint_m(cfg))
    flagged["calibrated"] = flagged["asset_id"].map(
        lambda a: "yes" if a is not None and str(a) in factors else "no")
    layer = gpd.GeoDataFrame(flagged[COLUMNS], geometry=list(flagged["geometry"]),
                             crs=run.inputs.crs)
    summary = cmp.asset_summary(flagged)
    run.extra_tables["layer:readings"] = layer
    run.extra_tables["csv:reconciliation.csv"] = pd.DataFrame(flagged[COLUMNS])
    run.extra_tables["csv:reconciliation_assets.csv"] = summary
    counts = flagged["status"].value_counts().to_dict()
    run.record["readings"] = {
        "layer": rd.label(settings), "counts": {str(k): int(v) for k, v in counts.items()},
        "anomalies": int(flagged["anomaly"].sum()),
        "calibration": cal.get("path"),
        "assets": json.loads(summary.to_json(orient="records"))}
    lost = len(flagged) - counts.get("placed", 0)
    if lost:
        log.warning("readings: %d of %d reading(s) not compared (listed in reconciliation.csv"
                    " with the reason)", lost, len(flagged))
    if int(flagged["anomaly"].sum()):
        log.warning("readings: %d anomal%s: |ln(measured/predicted)| > %g",
                    int(flagged["anomaly"].sum()),
                    "y" if int(flagged["anomaly"].sum()) == 1 else "ies",
                    float(settings["anomaly_log_residual"]))


def calibrate(cfg, out_path: Path | None = None) -> tuple[Path, dict]:
    """Fit the factors of every asset with readings and write the calibration file.

    The factors are fitted against the recorded attributes (a ``[calibration]`` of the
    config is not applied first), so a calibration never compounds on an older one.

    Parameters
    ----------
    cfg : corridor.config.Config
        A config with ``[readings]``.
    out_path : Path, optional
        The file to write (default ``[readings] calibration_path``).

    Returns
    -------
    tuple of (Path, dict)
        The file written and its content.

    Raises
    ------
    ConfigError
        The config has no ``[readings]``.
    """
    from corridor.compute import compute
    from corridor.errors import ConfigError
    from corridor.io.layers import read_inputs
    from corridor.io.outputs import SAFETY_CAUTION, write_csv
    from corridor.reconcile.fit import fit_asset
    from corridor.reconcile.model import model_stages

    settings = getattr(cfg, "readings", None)
    if not settings:
        raise ConfigError(f"{cfg.path.name}: readings: `corridor calibrate` needs a [readings]"
                          " section naming the readings")
    inputs = read_inputs(cfg)
    stages = model_stages()
    base = compute(cfg, inputs, stages, logging.DEBUG)
    segs = base.segment_table
    placed = rd.place(rd.read_table(settings, inputs.crs), segs, settings)
    compared = cmp.compare(placed, segs, inputs.lines)
    ok = np.isfinite(compared["log_residual"].to_numpy(float))
    ids = inputs.assets["asset_id"].astype(str).tolist()
    entries: dict[str, dict] = {}
    parts = []
    for aid, group in compared[ok].groupby(compared.loc[ok, "asset_id"].astype(str),
                                           sort=True):
        entry, rows = fit_asset(cfg, inputs, ids.index(aid), group, settings, stages)
        entries[aid] = entry
        parts.append(rows)
        log.info("calibration %s: coating x%.3g, soil x%.3g (fitted: %s)%s", aid,
                 entry["coating_factor"], entry["soil_factor"],
                 ", ".join(entry["fitted"]) or "nothing",
                 f"; {entry['note']}" if entry["note"] else "")
    after = pd.concat(parts) if parts else compared.iloc[:0].assign(
        log_residual_after=[], kept_in_fit=[])
    merged = compared.join(after[["log_residual_after", "kept_in_fit"]], how="left")
    breaks = cmp.break_chainages(inputs, segs)
    at_bound = {a for a, e in entries.items() if e["at_bound"]}
    flagged = cmp.flag_anomalies(merged.assign(log_residual=merged["log_residual_after"]),
                                 float(settings["anomaly_log_residual"]), breaks,
                                 _near_joint_m(cfg), at_bound)
    merged["anomaly"] = flagged["anomaly"]
    merged["likely_cause"] = flagged["likely_cause"]
    for aid, e in entries.items():
        e["anomalies"] = int(merged.loc[merged["asset_id"].astype(str) == aid,
                                        "anomaly"].sum())
    path = Path(out_path or settings["calibration_path"])
    data = {
        "format": CALIBRATION_FORMAT,
        "caution": SAFETY_CAUTION,
        "created_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "config_file": str(cfg.path),
        "readings_file": settings["path"],
        "readings_sha256": _sha256(Path(settings["path"])),
        "settings": {k: settings[k] for k in ("snap_tolerance_m", "anomaly_log_residual",
                                              "reading_sigma_log", "coating_factor_range",
                                              "soil_factor_range")},
        "assets": entries,
        "anomalies": json.loads(merged.loc[merged["anomaly"].astype(bool), [
            "reading_id", "asset_id", "chainage_m", "measured_v", "predicted_v",
            "log_residual_after", "likely_cause"]].to_json(orient="records")),
    }
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data, indent=2, default=str) + "\n", encoding="utf-8")
    csv_cols = ["reading_id", "measured_at", "asset_id", "segment_index", "chainage_m",
                "measured_v", "predicted_v", "log_residual", "log_residual_after",
                "kept_in_fit", "anomaly", "likely_cause", "current_basis", "status", "reason"]
    write_csv(pd.DataFrame(merged[csv_cols]), path.with_name(path.stem + "_readings.csv"))
    log.info("calibration written to %s (%d asset(s), %d anomal%s)", path, len(entries),
             len(data["anomalies"]), "y" if len(data["anomalies"]) == 1 else "ies")
    return path, data


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()
