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


def write_gpkg(result: Result, path: Path, review_threshold: float = 0.5,
               written: tuple[str, ...] = (), view: dict | None | bool = True) -> None:
    """Every layer of ``screening.gpkg``, then its styles and field descriptions.

    Runs in a forked process for large runs (:func:`write_outputs`): it changes
    nothing but the file.

    Parameters
    ----------
    written : tuple of str
        The first layers, already in the file (:class:`EarlyLayers`): not written again.
    view : dict, None or True
        The ``hazards`` view (:func:`hazards_view`) when already decided; True: decide here.
    """
    from corridor.io.styles import apply_styles

    layers = result.layers()
    if view is True:
        view = hazards_view(layers.get("hazards"), layers.get("segments"), review_threshold)
    for name, table in layers.items():
        if name in written:
            continue
        if name == "hazards" and isinstance(view, dict):
            write_view(path, name, "segments", **view)
        else:
            write_layer(table, path, name)
    apply_styles(path, list(layers), review_threshold=review_threshold)


def _write_first_layers(layers: dict, path: Path) -> None:
    for name, table in layers.items():
        write_layer(table, path, name)


def frame_digest(frame) -> bytes:
    """SHA-256 of what a layer writes from a table: columns, types, CRS and every value.

    Numeric and boolean columns are hashed from their memory, Arrow-backed columns as
    an Arrow IPC stream (their sliced values and any dictionary), other object columns
    from their pickled values; a geometry
    column from the addresses of its geometry objects (shapely geometries are
    immutable: the same objects are the same geometries). Used only to compare a
    table with itself later in one process while the geometry objects are held
    (:class:`EarlyLayers`), so two digests are equal only if nothing was changed.
    """
    import ctypes
    import hashlib
    import pickle

    import numpy as np
    from geopandas.array import GeometryDtype

    h = hashlib.sha256()
    geometry = getattr(frame, "_geometry_column_name", None)
    h.update(repr((list(map(str, frame.columns)), [str(d) for d in frame.dtypes], len(frame),
                   str(getattr(frame, "crs", None)) if geometry is not None else None,
                   geometry)).encode())
    for c in frame.columns:
        column = frame[c]
        array = column.array
        if isinstance(column.dtype, GeometryDtype):
            objects = np.ascontiguousarray(np.asarray(array, dtype=object))
            if len(objects):  # the object pointers, read without touching the objects
                raw = (ctypes.c_char * objects.nbytes).from_address(objects.ctypes.data)
                h.update(memoryview(raw))
        elif isinstance(column.dtype, np.dtype) and column.dtype != object:
            h.update(np.ascontiguousarray(column.to_numpy()).view(np.uint8).data)
        elif hasattr(array, "_pa_array"):  # Arrow-backed (text): as an Arrow stream
            import pyarrow as pa

            values = array._pa_array
            sink = pa.BufferOutputStream()  # the sliced ranges and any dictionary
            with pa.ipc.new_stream(sink, pa.schema([("v", values.type)])) as stream:
                for chunk in values.chunks:
                    stream.write_batch(pa.record_batch([chunk], names=["v"]))
            h.update(memoryview(sink.getvalue()))
        else:
            h.update(pickle.dumps(column.to_numpy(dtype=object).tolist(), protocol=5))
    return h.digest()


class EarlyLayers:
    """The first layers of ``screening.gpkg`` (``exposures``, ``segments``), written by a
    forked process as soon as the segments are ranked.

    The segments layer is most of the GeoPackage's write (about 12 s of GDAL work on
    the 2.5 M-segment benchmark). Started right after the ``rank`` stage, it runs
    beside the rest of the run-wide stages, the CSV files and the report instead of
    after them. The child writes the tables as they are at the fork; this process
    keeps a digest of them (:func:`frame_digest`, computed after the fork, beside the
    child) and :meth:`adopt` compares it with the finished run's tables: the file
    is used only when they are unchanged, otherwise the child is stopped, its file
    removed and the GeoPackage written whole as before. Started only for runs of
    :data:`GPKG_PROCESS_ABOVE_ROWS` segments or more, where a process can be forked,
    and when the stages after ``rank`` are the standard ones (the runner decides).
    """

    FIRST = ("exposures", "segments")

    def __init__(self, path: Path):
        self.path = Path(path)
        self._handle: background.BackgroundWrite | None = None
        self._digests: dict[str, bytes] = {}
        self._held: list = []

    @property
    def started(self) -> bool:
        return self._handle is not None

    def start(self, run) -> None:
        """Fork the writer of the first layers of ``run`` (nothing for a small run)."""
        import numpy as np

        result = result_of(run)
        layers = result.layers()
        first = {name: layers.get(name) for name in self.FIRST}
        segments = first["segments"]
        if (segments is None or len(segments) < GPKG_PROCESS_ABOVE_ROWS
                or list(layers)[:len(self.FIRST)] != list(self.FIRST)
                or not all(hasattr(t, "geometry") for t in first.values())
                or not background.forking_available()):
            return
        try:
            self._remove_file()
            self._handle = background.start(_write_first_layers, first, self.path, fork=True)
            # the geometry objects stay alive, so their addresses mean the same objects
            self._held = [np.array(t.geometry.array, dtype=object, copy=True)
                          for t in first.values() if t is not None]
            self._digests = {name: frame_digest(t) for name, t in first.items()}
        except Exception:  # a speed-up only: the file is then written whole, as before
            log.debug("no early GeoPackage writer", exc_info=True)
            self.cancel()
            return
        log.debug("the layers %s are being written by a forked process",
                  ", ".join(self.FIRST))

    def adopt(self, result: Result) -> tuple[str, ...]:
        """The layers already being written, when the run's tables are still the ones the
        child writes; otherwise () after stopping the child and removing its file."""
        if self._handle is None:
            return ()
        layers = result.layers()
        try:
            same = (list(layers)[:len(self.FIRST)] == list(self.FIRST)
                    and all(layers[name] is not None and frame_digest(layers[name]) == digest
                            for name, digest in self._digests.items()))
        except Exception:  # cannot tell: written whole
            log.debug("the early GeoPackage layers could not be compared", exc_info=True)
            same = False
        if same:
            return self.FIRST
        log.info("a run-wide step changed the segment or exposure table after ranking: the"
                 " GeoPackage is written whole")
        self.cancel()
        return ()

    def wait(self) -> float:
        """Wait for the child; its write time [s]. Raises what the write raised."""
        if self._handle is None:
            return 0.0
        handle = self._handle
        try:
            handle.wait()
        finally:
            self._handle = None
            self._held = []
        return handle.seconds

    def cancel(self) -> None:
        """Stop the child (if running) and remove its file."""
        if self._handle is not None:
            self._handle.cancel()
            self._handle = None
            self._held = []
            self._remove_file()

    def _remove_file(self) -> None:
        """The file and any SQLite journal a stopped writer left beside it."""
        for suffix in ("", "-journal", "-wal", "-shm"):
            Path(f"{self.path}{suffix}").unlink(missing_ok=True)


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
                  reuse_names: set[str] | None = None,
                  early: EarlyLayers | None = None) -> dict[str, Path]:
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
    early : EarlyLayers, optional
        The first layers of ``screening.gpkg``, started after the ranking: used when
        the run's tables are unchanged since (:meth:`EarlyLayers.adopt`); the other
        layers are then added on this thread once it is done.
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
    first: tuple[str, ...] = ()
    if early is not None and (reused or early.path != paths["gpkg"]):
        early.cancel()
    elif early is not None:
        first = early.adopt(result)
    if reused and reuse_from is not None:
        for name in REUSABLE_OUTPUTS:
            shutil.copy2(reuse_from / name, out_dir / name)
        for fmt_file in sorted(reuse_from.iterdir()):
            if fmt_file.suffix in (".fgb", ".parquet") and ours(fmt_file.name):
                shutil.copy2(fmt_file, out_dir / fmt_file.name)
        log.info("inputs unchanged since the previous run: its layers are reused")
    elif not first:
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
        if first and early is not None:
            # the rest of the GeoPackage once the child's layers are in: the hazards
            # view is decided before the wait, the small layers written after it
            threshold = getattr(run.limit_set, "review_threshold", 0.5)
            layers = result.layers()
            view = hazards_view(layers.get("hazards"), layers.get("segments"), threshold)
            child_s = early.wait()
            t2 = time.perf_counter()
            write_gpkg(result, paths["gpkg"], threshold, written=first, view=view)
            run.timings_s["write_gpkg"] = round(child_s + time.perf_counter() - t2, 4)
            run.counts["gpkg_written_in_process"] = 1
    finally:
        if gpkg_write is not None:
            gpkg_write.cancel()  # an error or an interrupt above: the writer stops too
        if early is not None:
            early.cancel()
    # the data files' wall time, the report (rendered alongside a forked GeoPackage
    # write, or on this thread before the wait) excluded
    run.timings_s["write"] = round(time.perf_counter() - t0 - run.timings_s["report"], 4)
    if gpkg_write is not None:
        run.timings_s["write_gpkg"] = round(gpkg_write.seconds, 4)
        run.counts["gpkg_written_in_process"] = int(gpkg_write.forked)
    run.counts["outputs_reused"] = int(reused)
    run.counts["gpkg_segments_early"] = int(bool(first))
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
