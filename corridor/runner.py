"""Running a screening end to end and publishing its outputs atomically.

Outputs are written into a temporary folder beside the output folder and
swapped in only when the run is complete, so a failed or killed run leaves
the previous outputs intact.
"""

from __future__ import annotations

import logging
import os
import shutil
import time
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from corridor.config import Config
from corridor.io.outputs import SAFETY_CAUTION, sha256_file, write_csv, write_json, write_layer
from corridor.pipeline import Run, output_paths, run_screening, versions

log = logging.getLogger(__name__)


def _input_files(cfg: Config) -> list[Path]:
    paths = [cfg.path, cfg.arrangements_path, cfg.power_lines.path]
    paths += [a.path for a in cfg.assets]
    paths += [s.path for s in (cfg.soil, cfg.grounds, cfg.towers) if s is not None]
    seen: list[Path] = []
    for p in paths:
        if p not in seen:
            seen.append(p)
    return seen


def write_outputs(run: Run, out_dir: Path) -> dict[str, Path]:
    """Write every output of a finished run into ``out_dir``."""
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = output_paths(out_dir)
    t0 = time.perf_counter()
    seg = run.segment_table
    write_layer(run.exposure_table, paths["gpkg"], "exposures")
    write_layer(seg, paths["gpkg"], "segments")
    for name, table in run.extra_tables.items():
        if hasattr(table, "geometry") and name.startswith("layer:"):
            write_layer(table, paths["gpkg"], name.split(":", 1)[1])
    write_csv(run.exposure_table.drop(columns="geometry"), paths["exposures_csv"])
    write_csv(run.inputs.rejected.frame(), paths["rejected_csv"])
    for name, table in run.extra_tables.items():
        if name.startswith("csv:"):
            target = out_dir / name.split(":", 1)[1]
            write_csv(pd.DataFrame(table.drop(columns="geometry", errors="ignore")), target)
            paths[target.stem] = target
    run.timings_s["write"] = round(time.perf_counter() - t0, 4)
    record = {
        "caution": SAFETY_CAUTION,
        "finished_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "config_file": str(run.config.path),
        "inputs": [{"path": str(p), "sha256": sha256_file(p),
                    "modified_utc": datetime.fromtimestamp(p.stat().st_mtime, UTC)
                    .isoformat(timespec="seconds")} for p in _input_files(run.config)],
        "resolved_config": dict(run.config.resolved),
        "versions": versions(),
        "crs": run.inputs.crs.to_string(),
        "counts": run.counts,
        "timings_s": run.timings_s,
        "warnings": run.inputs.warnings[:1000],
    }
    record.update(run.extra_tables.get("json", {}))
    write_json(record, paths["run_json"])
    return paths


def publish(cfg: Config, out_dir: Path | None = None, stages: dict | None = None,
            final_stages: dict | None = None) -> Run:
    """Run a screening and swap its outputs into place atomically."""
    out_dir = Path(out_dir or cfg.output_dir).resolve()
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    run = run_screening(cfg, stages, final_stages)
    tmp = out_dir.parent / f".{out_dir.name}.tmp-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    try:
        write_outputs(run, tmp)
        old = out_dir.parent / f".{out_dir.name}.old-{os.getpid()}"
        if out_dir.exists():
            os.rename(out_dir, old)
        os.rename(tmp, out_dir)
        if old.exists():
            shutil.rmtree(old)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)
    return run
