"""The GeoPackage written in a forked process is the same file content as one written
in the run's own process, and a failure in the child fails the run as it would inline.

References: the project's own output contract (README, Outputs: same layers and
values whichever way they are written); POSIX ``fork`` and ``errno`` semantics
(a child's exit code and an ``OSError``'s errno survive the trip, common practice).
"""

import errno
import json
import logging
import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest

from corridor.cli import main
from corridor.io import background
from corridor.io import write as write_mod

ROOT = Path(__file__).resolve().parents[1]

needs_fork = pytest.mark.skipif(not background.forking_available(),
                                reason="the forked writer is Linux only")


def _write_text(path, text):
    Path(path).write_text(text, encoding="utf-8")


def _fail_disk_full(path):
    raise OSError(errno.ENOSPC, "No space left on device", str(path))


def _die(path):
    os._exit(3)


@needs_fork
def test_child_writes_the_file_in_another_process(tmp_path):
    target = tmp_path / "a.txt"
    job = background.start(_write_text, target, f"pid {os.getpid()}")
    assert job.forked
    job.wait()
    assert target.read_text(encoding="utf-8") == f"pid {os.getpid()}"
    assert job.seconds >= 0.0


@needs_fork
def test_an_error_in_the_child_is_raised_here_with_its_errno(tmp_path):
    job = background.start(_fail_disk_full, tmp_path / "b.gpkg")
    with pytest.raises(OSError) as info:
        job.wait()
    assert info.value.errno == errno.ENOSPC


@needs_fork
def test_a_child_that_dies_fails_loudly(tmp_path):
    job = background.start(_die, tmp_path / "c.gpkg")
    with pytest.raises(RuntimeError, match="exit code 3"):
        job.wait()


def test_without_fork_the_write_runs_at_once(tmp_path):
    target = tmp_path / "d.txt"
    job = background.start(_write_text, target, "inline", fork=False)
    assert not job.forked
    assert target.read_text(encoding="utf-8") == "inline"  # before wait
    job.wait()


def _run(cfg, out):
    rc = main(["run", str(cfg), "--out", str(out), "-q"])
    for h in list(logging.getLogger("corridor").handlers):
        logging.getLogger("corridor").removeHandler(h)
    return rc


@needs_fork
@pytest.mark.parametrize("early", [False, True])
def test_demo_geopackage_forked_equals_inline(tmp_path, monkeypatch, early):
    """The GeoPackage written by a forked process, whole at the end (``early`` False) or
    its segments layer from right after the ranking, beside the tables, CSV files and
    report (``early`` True), is the file written on the run's own thread: same layers in
    the same order, values and styles. Source: the output contract (README, Outputs)."""
    from corridor import runner

    cfg = _demo(tmp_path)
    monkeypatch.setattr(write_mod, "GPKG_PROCESS_ABOVE_ROWS", 10**12)
    assert _run(cfg, tmp_path / "inline") == 0
    monkeypatch.setattr(write_mod, "GPKG_PROCESS_ABOVE_ROWS", 0)
    if not early:
        monkeypatch.setattr(runner, "_early_layers", lambda *args: None)
    assert _run(cfg, tmp_path / "forked") == 0
    rec = json.loads((tmp_path / "forked" / "run.json").read_text())
    assert rec["counts"]["gpkg_written_in_process"] == 1
    assert rec["counts"]["gpkg_segments_early"] == int(early)
    assert rec["timings_s"]["write_gpkg"] > 0
    b = tmp_path / "forked" / "screening.gpkg"
    _assert_same_geopackage(tmp_path / "inline" / "screening.gpkg", b)
    import sqlite3

    with sqlite3.connect(b) as con:  # the hazards view stands on the segments layer
        kinds = dict(con.execute("SELECT name, type FROM sqlite_master WHERE name IN"
                                 " ('segments', 'hazards')"))
    assert kinds == {"segments": "table", "hazards": "view"}


def _assert_same_geopackage(a, b):
    """Same layers in the same order, values, geometries, and the styles and field
    descriptions added after the layers."""
    import sqlite3

    names = [str(n) for n in pyogrio.list_layers(a)[:, 0]]
    assert names == [str(n) for n in pyogrio.list_layers(b)[:, 0]]
    for layer in names:
        fa = pyogrio.read_dataframe(a, layer=layer)
        fb = pyogrio.read_dataframe(b, layer=layer)
        drop = ["geometry", "update_time"]  # (style rows are stamped with their time)
        pd.testing.assert_frame_equal(pd.DataFrame(fa.drop(columns=drop, errors="ignore")),
                                      pd.DataFrame(fb.drop(columns=drop, errors="ignore")))
        if "geometry" in fa.columns:
            assert fa.geometry.geom_equals_exact(fb.geometry, 0.0).all()

    def styles(path):
        with sqlite3.connect(path) as con:
            return sorted(con.execute("SELECT f_table_name, styleName, styleQML"
                                      " FROM layer_styles"))

    assert styles(a) == styles(b) and styles(b)


def _demo(tmp_path):
    work = tmp_path / "w"
    shutil.copytree(ROOT / "config", work / "config")
    shutil.copytree(ROOT / "sample_layers", work / "sample_layers")
    return work / "config" / "demo.toml"


def _segments(path):
    return pd.DataFrame(pyogrio.read_dataframe(path, layer="segments").drop(columns="geometry"))


@needs_fork
def test_a_change_to_the_segments_after_ranking_is_written_not_the_early_copy(
        tmp_path, monkeypatch):
    """A run-wide step that changes the segment table after the ranking: the early
    writer's copy is discarded (its digest no longer matches) and the layer holds the
    changed values. Source: the output contract (README, Outputs: the layers hold the
    run's values)."""
    from corridor.steps import report_tables

    cfg = _demo(tmp_path)
    original = report_tables.stage_tables

    def changing(run):
        run.segment_table.loc[0, "v_normal_v"] = 12345.0
        original(run)

    monkeypatch.setattr(report_tables, "stage_tables", changing)
    monkeypatch.setattr(write_mod, "GPKG_PROCESS_ABOVE_ROWS", 0)
    started = []
    real_start = write_mod.EarlyLayers.start

    def spy(self, run):
        real_start(self, run)
        started.append(self.started)

    monkeypatch.setattr(write_mod.EarlyLayers, "start", spy)
    assert _run(cfg, tmp_path / "out") in (0, 1)
    assert started == [True]  # the early writer ran ...
    rec = json.loads((tmp_path / "out" / "run.json").read_text())
    assert rec["counts"]["gpkg_segments_early"] == 0  # ... and its file was not used
    seg = _segments(tmp_path / "out" / "screening.gpkg")
    assert seg.loc[seg["segment_id"] == 0, "v_normal_v"].item() == 12345.0


@needs_fork
def test_a_caller_stage_after_ranking_gets_no_early_writer(tmp_path, monkeypatch):
    """Stages of the caller's own after ``rank``: the segments are written whole, after
    every stage. Source: the output contract (README, Outputs)."""
    from corridor.config import load_config
    from corridor.runner import publish
    from corridor.steps import asset_stages, run_stages

    cfg = load_config(_demo(tmp_path))
    monkeypatch.setattr(write_mod, "GPKG_PROCESS_ABOVE_ROWS", 0)

    def mark(run):
        run.segment_table["v_normal_v"] = run.segment_table["v_normal_v"] + 0.0

    started = []
    monkeypatch.setattr(write_mod.EarlyLayers, "start",
                        lambda self, run: started.append(run))
    stages = {**run_stages(), "mark": mark}
    run = publish(cfg, tmp_path / "out", asset_stages(), stages)
    for h in list(logging.getLogger("corridor").handlers):
        logging.getLogger("corridor").removeHandler(h)
    assert started == []  # never forked, not forked and discarded
    assert run.counts["gpkg_segments_early"] == 0
    assert len(_segments(tmp_path / "out" / "screening.gpkg")) == len(run.segment_table)


@needs_fork
def test_an_early_write_that_fails_fails_the_write(tmp_path, monkeypatch):
    """A full disk in the early writer is raised when its layers are awaited, errno kept
    (POSIX errno semantics, common practice)."""
    import geopandas as gpd
    import shapely

    monkeypatch.setattr(write_mod, "GPKG_PROCESS_ABOVE_ROWS", 0)
    monkeypatch.setattr(write_mod, "_write_first_layers", lambda layers, path: _fail_disk_full(
        path))
    table = gpd.GeoDataFrame({"v": [1.0]}, geometry=[shapely.LineString([(0, 0), (1, 1)])],
                             crs=3035)

    class FakeRun:
        pass

    early = write_mod.EarlyLayers(tmp_path / "x.gpkg")
    monkeypatch.setattr(write_mod, "result_of", lambda run: write_mod.Result(
        segments=table, exposures=table, rejected=pd.DataFrame(), power_lines=table))
    early.start(FakeRun())
    assert early.started
    with pytest.raises(OSError) as info:
        early.wait()
    assert info.value.errno == errno.ENOSPC


def test_digest_sees_every_change_to_a_table():
    """The early writer's check: a table's digest changes with any value, type, column,
    order or CRS, and stays for an untouched copy (the definition of 'unchanged' it
    relies on; common practice)."""
    import geopandas as gpd
    import pyarrow as pa
    import shapely

    lines = shapely.linestrings(np.arange(48.0).reshape(12, 2, 2))
    kinds = pd.array(pa.array(["pipe", "cable"] * 6).dictionary_encode(),
                     dtype=pd.ArrowDtype(pa.dictionary(pa.int32(), pa.string())))
    base = gpd.GeoDataFrame({"v": np.arange(12.0), "s": pd.array(list("abcdefghijkl"),
                                                                   dtype="str"),
                             "k": kinds, "o": [1, "x"] * 6}, geometry=lines, crs=3035)
    digest = write_mod.frame_digest
    d = digest(base)
    assert digest(base.copy(deep=False)) == d and digest(base.copy()) == d
    other_kinds = pd.array(pa.array(["fence", "rail"] * 6).dictionary_encode(),
                           dtype=kinds.dtype)  # same indices, other dictionary
    changed = [base.assign(v=base["v"].where(base.index != 3, 99.0)),
               base.assign(s=base["s"].str.upper()), base.assign(k=other_kinds),
               base.assign(o=[1, "y"] * 6), base[["s", "v", "k", "o", "geometry"]],
               base.iloc[::-1], base.set_crs(4326, allow_override=True), base.assign(w=1)]
    for frame in changed:
        assert digest(frame) != d
    strided = base.iloc[::2].copy(deep=False)
    before = digest(strided)
    strided.geometry.array[5] = shapely.LineString([(0, 0), (9, 9)])  # the last row
    assert digest(strided) != before
