"""Writing a finished run's outputs, driven by its typed result (:class:`corridor.result.Result`).

Into a folder (the runner's staging folder): ``screening.gpkg`` (every layer
of :meth:`Result.layers`, then styles and field descriptions), the other
formats, the CSV files of :meth:`Result.csv_files`, ``report.html`` and last
``run.json``. A rerun with every input unchanged copies the previous data
files instead (:data:`REUSABLE_OUTPUTS`); the report is always rendered.
"""

from __future__ import annotations

import logging
import shutil
import time
from datetime import UTC, datetime
from pathlib import Path

from corridor.io import background
from corridor.io.outputs import SAFETY_CAUTION, write_csv, write_json, write_layer, write_view
from corridor.io.provenance import input_records
from corridor.result import Result, result_of

log = logging.getLogger(__name__)

#: Outputs that depend only on the per-asset results and the inputs: a run whose
#: inputs are all unchanged since the previous run copies them as they are.
REUSABLE_OUTPUTS = ("screening.gpkg", "exposures.csv", "rejected.csv", "grounding_sites.csv")

#: A run with at least this many segments writes ``screening.gpkg`` in a forked
#: process (:mod:`corridor.io.background`, Linux) while this process writes the
#: other files and renders the report; a smaller run writes it on this thread.
GPKG_PROCESS_ABOVE_ROWS = 200_000


def output_paths(out_dir: Path) -> dict[str, Path]:
    """The fixed output files of a run in ``out_dir``."""
    return {
        "gpkg": out_dir / "screening.gpkg",
        "exposures_csv": out_dir / "exposures.csv",
        "rejected_csv": out_dir / "rejected.csv",
        "run_json": out_dir / "run.json",
        "caution": out_dir / CAUTION_FILE,
    }


#: The caution beside the CSV files: an empty CSV (a header and no rows) has no
#: row to carry it in its ``caution`` column, so every run also writes this file.
CAUTION_FILE = "CAUTION.txt"


def write_caution(path: Path) -> None:
    """The safety caution as a plain-text file beside the outputs."""
    path.write_text(
        SAFETY_CAUTION + "\n\nEvery CSV file of this folder carries this caution in its last"
        " column, 'caution', on every row; a CSV without rows carries it through this file."
        " report.html and run.json carry it as well.\n", encoding="utf-8")


def write_gpkg(result: Result, path: Path, review_threshold: float = 0.5) -> None:
    """Every layer of ``screening.gpkg``, then its styles and field descriptions.

    Runs in a forked process for large runs (:func:`write_outputs`): it changes
    nothing but the file.
    """
    from corridor.io.styles import apply_styles

    layers = result.layers()
    view = hazards_view(layers.get("hazards"), layers.get("segments"), review_threshold)
    for name, table in layers.items():
        if name == "hazards" and view is not None:
            write_view(path, name, "segments", **view)
        else:
            write_layer(table, path, name)
    apply_styles(path, list(layers), review_threshold=review_threshold)


def hazards_view(hazards, segments, review_threshold: float) -> dict | None:
    """The ``hazards`` layer as a view on ``segments``, when it is exactly one.

    The hazards layer is the segments at or above the review threshold with some
    of their columns (:func:`corridor.steps.report_tables.hazards_layer`). Written
    as a view on the segments layer it costs no second copy of those rows (about
    7 s of the 2.5 M-segment benchmark's GeoPackage write); its rows are then in the
    segments layer's order (asset, chainage; ``rank`` gives worst first) and its
    feature ids are the segments'. Only when every row, column, type, value and
    geometry of ``hazards`` equals the view's (checked here, in the writer);
    otherwise (a plugin step changed one of the tables, say) None, and the layer is
    written as a table, worst first.

    Returns
    -------
    dict or None
        Keyword arguments of :func:`corridor.io.outputs.write_view`, or None.
    """
    import numpy as np
    import shapely

    from corridor.steps.report_tables import hazard_rows

    if (hazards is None or segments is None or len(segments) == 0
            or not np.isfinite(review_threshold)):
        return None
    geom = segments.geometry.name
    columns = [c for c in hazards.columns if c != hazards.geometry.name]
    if (hazards.geometry.name != geom or hazards.crs != segments.crs
            or any(c not in segments.columns or c in ("fid", geom) for c in columns)
            or "rank" not in segments or "utilization" not in segments):
        return None
    sel = hazard_rows(segments, review_threshold)
    if len(sel) != len(hazards):
        return None
    for c in columns:
        mine, theirs = hazards[c].array, segments[c].array
        if mine.dtype != theirs.dtype or not mine.equals(theirs.take(sel)):
            return None
    a = np.asarray(hazards.geometry.array, dtype=object)
    b = np.asarray(segments.geometry.array, dtype=object)[sel]
    if not all(x is y for x, y in zip(a, b, strict=True)) and not bool(
            np.array_equal(shapely.to_wkb(a), shapely.to_wkb(b))):
        return None
    bounds = tuple(hazards.total_bounds) if len(hazards) else None
    return {"columns": columns,
            "where": f'"utilization" >= {float(review_threshold)!r}', "bounds": bounds}


def write_outputs(run, out_dir: Path, previous: dict | None = None,
                  reuse_from: Path | None = None,
                  reuse_names: set[str] | None = None) -> dict[str, Path]:
    """Write every output of a finished run into ``out_dir``.

    The GeoPackage, the other formats, the CSV files and the report, then
    ``run.json`` (with the write and report times) last. pyogrio holds the
    GIL while GDAL inserts rows, so a second thread would not overlap the
    report with the layers (measured: the report took 6x longer beside a
    GeoPackage write): a run of :data:`GPKG_PROCESS_ABOVE_ROWS` segments or
    more writes ``screening.gpkg`` in a forked process
    (:mod:`corridor.io.background`) while this one writes the other files and
    renders the report. The file is the same either way.

    Times in ``run.timings_s``: ``report`` (rendering), ``write`` (the wall
    time of the whole output phase less ``report``: what the data files add),
    ``write_gpkg`` (the GeoPackage write itself, in whichever process).

    Parameters
    ----------
    run : corridor.pipeline.Run
        The finished run; its tables are read through :func:`corridor.result.result_of`.
    previous : dict, optional
        The previous run's run.json, for the report's change section.
    reuse_from : Path, optional
        The previous output folder, when every input is unchanged since then:
        its data files are copied instead of written again (same content as a
        fresh write; much faster for large runs).
    reuse_names : set of str, optional
        The files of ``reuse_from`` that corridor wrote (its manifest); only
        these are copied. None: every file of the names corridor writes.
    """
    from corridor.compute import versions
    from corridor.io.formats import write_extra_formats
    from corridor.report import write_report

    result = result_of(run)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = output_paths(out_dir)
    t0 = time.perf_counter()
    formats = list(run.config.run.output_formats)
    records = input_records(run.config)

    def ours(name: str) -> bool:
        return reuse_names is None or name in reuse_names

    reused = reuse_from is not None and all((reuse_from / n).exists() and ours(n)
                                            for n in REUSABLE_OUTPUTS)
    gpkg_write = None
    if reused and reuse_from is not None:
        for name in REUSABLE_OUTPUTS:
            shutil.copy2(reuse_from / name, out_dir / name)
        for fmt_file in sorted(reuse_from.iterdir()):
            if fmt_file.suffix in (".fgb", ".parquet") and ours(fmt_file.name):
                shutil.copy2(fmt_file, out_dir / fmt_file.name)
        log.info("inputs unchanged since the previous run: its layers are reused")
    else:
        # a large GeoPackage is written by a forked process while this one writes
        # the rest and renders the report (corridor.io.background)
        rows = len(result.segments) if result.segments is not None else 0
        gpkg_write = background.start(
            write_gpkg, result, paths["gpkg"],
            getattr(run.limit_set, "review_threshold", 0.5),
            fork=rows >= GPKG_PROCESS_ABOVE_ROWS)
    try:
        if not reused:
            write_extra_formats(result.layers(), out_dir, formats)
        for name, table in result.csv_files().items():
            target = out_dir / name
            if not (reused and name in REUSABLE_OUTPUTS):
                write_csv(table, target)
            if name not in ("exposures.csv", "rejected.csv"):
                paths[target.stem] = target
        write_caution(paths["caution"])
        t1 = time.perf_counter()
        paths["report"] = write_report(run, out_dir, previous, inputs=records)
        run.timings_s["report"] = round(time.perf_counter() - t1, 4)
        if gpkg_write is not None:
            gpkg_write.wait()
    finally:
        if gpkg_write is not None:
            gpkg_write.cancel()  # an error or an interrupt above: the writer stops too
    # the data files' wall time, the report (rendered alongside a forked GeoPackage
    # write, or on this thread before the wait) excluded
    run.timings_s["write"] = round(time.perf_counter() - t0 - run.timings_s["report"], 4)
    if gpkg_write is not None:
        run.timings_s["write_gpkg"] = round(gpkg_write.seconds, 4)
        run.counts["gpkg_written_in_process"] = int(gpkg_write.forked)
    run.counts["outputs_reused"] = int(reused)
    record = {
        "caution": SAFETY_CAUTION,
        "finished_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "config_file": str(run.config.path),
        "inputs": records,
        "resolved_config": dict(run.config.resolved),
        "versions": versions(),
        "crs": run.inputs.crs.to_string(),
        "counts": run.counts,
        "timings_s": run.timings_s,
        "warnings": run.inputs.warnings[:1000],
    }
    record.update(result.record)
    write_json(record, paths["run_json"])
    return paths
