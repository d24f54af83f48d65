"""Exit codes and messages of the command line (README "Command line" table).

Exit 5: a rejected power line (its induced voltages are not assessed, so the
results are incomplete: a screening must say so loudly, never pass it);
exit 2 with the cause for a full disk or a refused write (ENOSPC, EACCES:
POSIX errno meanings); a closed pipe ends quietly with 0 (the behaviour of
Unix filters such as ``head`` expect, common practice); an internal error's
log never goes into the working folder.
"""

from __future__ import annotations

import errno
import json
import subprocess
import sys
from types import SimpleNamespace

import geopandas as gpd
import pandas as pd
import pytest

from tests.conftest import Scenario
from tests.test_overnight import fences, hashes, make


def _two_lines_one_bad(root):
    """The fences scenario with a second line whose voltage is missing (NULL)."""
    sc = Scenario(root)
    cfg = sc.build(assets=fences())
    lines = sc.line_frame()
    bad = lines.assign(LINE_ID="L2", KV=None)
    bad["geometry"] = bad.geometry.translate(0.0, -50.0)
    both = gpd.GeoDataFrame(pd.concat([lines, bad], ignore_index=True), crs=lines.crs)
    sc.write_layer(both, "power_lines")
    return sc, cfg


def test_rejected_power_line_exits_5_after_publishing(tmp_path, cli, capsys):
    sc, cfg = _two_lines_one_bad(tmp_path)
    path = sc.write_config(cfg)
    assert cli(["run", str(path), "-q", "--fail-on-exceedance"]) == 5
    err = capsys.readouterr().err
    assert "power line L2 rejected (layer power_lines.gpkg:power_lines, field 'KV'): missing" in err
    assert "published but incomplete" in err
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert record["rejected_power_lines"] == [{"line_id": "L2", "field": "KV",
                                               "reason": "missing"}]
    assert record["counts"]["rejected_power_lines"] == 1
    assert record["counts"]["rejected_assets"] == 0
    assert isinstance(record["defaults_used"], dict)
    # nothing changed: the previous outputs are published again, with the same exit code
    assert cli(["run", str(path), "-q"]) == 5
    err = capsys.readouterr().err
    assert "power line L2 rejected (layer power_lines.gpkg:power_lines, field 'KV')" in err
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert record["counts"]["outputs_reused"] == 1
    assert record["counts"]["rejected_power_lines"] == 1


def test_exit_code_precedence_and_accepting_rejected_lines():
    """5 outranks 1; run.accept_rejected_lines restores the exit code of a complete run."""
    from corridor.cli import run_exit_code

    def run(accept, rejected, exceeding):
        cfg = SimpleNamespace(run=SimpleNamespace(accept_rejected_lines=accept))
        return SimpleNamespace(config=cfg, counts={"rejected_power_lines": rejected,
                                                   "segments_exceeding": exceeding})

    assert run_exit_code(run(False, 1, 3), True) == 5
    assert run_exit_code(run(False, 1, 0), False) == 5
    assert run_exit_code(run(True, 1, 3), True) == 1
    assert run_exit_code(run(True, 1, 3), False) == 0
    assert run_exit_code(run(False, 0, 3), True) == 1
    assert run_exit_code(run(False, 0, 0), True) == 0


def test_rejected_assets_are_warned_under_quiet_with_a_bound(tmp_path, cli, capsys):
    from corridor.io.layers import REJECTED_SHOWN

    sc = Scenario(tmp_path)
    a = fences()
    n_bad = REJECTED_SHOWN + 3
    bad = gpd.GeoDataFrame(pd.concat([a.iloc[[0]]] * n_bad, ignore_index=True), crs=a.crs)
    bad["AID"] = [f"Z{i}" for i in range(n_bad)]
    x, y = a.geometry.iloc[0].coords[0]
    from shapely.geometry import LineString

    bad["geometry"] = [LineString([(x, y), (x, y)])] * n_bad  # zero length: rejected
    cfg = sc.build(assets=gpd.GeoDataFrame(pd.concat([a, bad], ignore_index=True), crs=a.crs))
    path = sc.write_config(cfg)
    assert cli(["run", str(path), "-q"]) == 0
    err = capsys.readouterr().err
    shown = [ln for ln in err.splitlines() if "WARNING: asset Z" in ln]
    assert len(shown) == REJECTED_SHOWN
    assert "and 3 more rejected assets" in err
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert record["counts"]["rejected_assets"] == n_bad


def test_defaults_used_lists_ids_of_safety_fields_only():
    from corridor.pipeline import defaults_used_record

    inputs = SimpleNamespace(defaults_used={"clearing_time_s": ["F1", "F2"],
                                            "post_type": ["F3"], "height_m": ["F1"]})
    assert defaults_used_record(inputs) == {
        "clearing_time_s": {"count": 2, "ids": ["F1", "F2"]},
        "height_m": {"count": 1},
        "post_type": {"count": 1, "ids": ["F3"]}}
    assert defaults_used_record(SimpleNamespace()) == {}


# -- check --------------------------------------------------------------------------

def test_check_prints_plain_summary(tmp_path, cli, capsys):
    path = make(tmp_path)
    assert cli(["check", str(path), "-q"]) == 0
    out = capsys.readouterr().out
    assert "power lines (power_lines.gpkg:power_lines): 1 usable, 0 rejected" in out
    assert "assets (assets.gpkg:assets): 4 usable, 0 rejected" in out
    assert "{" not in out


def test_check_fails_when_no_power_line_is_usable(tmp_path, cli, capsys):
    sc = Scenario(tmp_path)
    cfg = sc.build(assets=fences())
    sc.write_layer(sc.line_frame().assign(KV=None), "power_lines")
    path = sc.write_config(cfg)
    assert cli(["check", str(path)]) == 2
    captured = capsys.readouterr()
    assert "power lines (power_lines.gpkg:power_lines): 0 usable, 1 rejected" in captured.out
    assert "no usable feature" in captured.err


# -- the file system refusing ----------------------------------------------------------

@pytest.mark.parametrize("failure", [
    OSError(errno.ENOSPC, "No space left on device", "exposures.csv"),
    OSError(errno.EACCES, "Permission denied", "exposures.csv"),
    RuntimeError("sqlite3_exec(COMMIT) failed: database or disk is full"),
], ids=["enospc", "eacces", "gdal-text"])
def test_disk_full_or_no_permission_exits_2_with_the_cause(tmp_path, cli, capsys,
                                                           monkeypatch, failure):
    import corridor.io.write as writer

    path = make(tmp_path)
    assert cli(["run", str(path), "-q"]) == 0
    out = tmp_path / "out"
    before = hashes(out)
    make(tmp_path, post_ohm={"F1": 9.0})  # a changed input: every output is written again

    def refuse(*a, **kw):
        raise failure

    monkeypatch.setattr(writer, "write_csv", refuse)
    capsys.readouterr()
    assert cli(["run", str(path), "-q"]) == 2
    err = capsys.readouterr().err
    assert "internal error" not in err and "Traceback" not in err
    assert str(failure.args[-1] if isinstance(failure, RuntimeError)
               else failure.strerror) in err
    assert hashes(out) == before
    assert not (tmp_path / "out.lock").exists()


# -- pipes and crash logs ------------------------------------------------------------

def test_closed_pipe_ends_quietly(tmp_path):
    p = subprocess.Popen([sys.executable, "-m", "corridor", "steps", "--json"],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=tmp_path)
    p.stdout.close()  # the reader is gone before anything is written
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=60) == 0, err
    assert "Traceback" not in err and "internal error" not in err
    assert list(tmp_path.iterdir()) == []


def test_internal_error_log_goes_to_temp_folder_not_working_folder(tmp_path, cli, capsys,
                                                                   monkeypatch):
    import tempfile

    import corridor.cli as cli_mod

    temp = tmp_path / "tmp"
    temp.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(temp))
    path = make(tmp_path / "s")

    def boom(cfg):
        raise RuntimeError("a bug")

    monkeypatch.setattr(cli_mod, "check", boom)
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    assert cli(["check", str(path)]) == 3
    err = capsys.readouterr().err
    logs = list(temp.glob("corridor-crash-*.log"))
    assert len(logs) == 1 and str(logs[0]) in err
    assert "RuntimeError: a bug" in logs[0].read_text(encoding="utf-8")
    assert list(work.iterdir()) == []


def test_internal_error_in_a_run_logs_beside_the_output_folder(tmp_path, cli, capsys,
                                                               monkeypatch):
    import corridor.runner as runner

    path = make(tmp_path)

    def boom(*a, **kw):
        raise RuntimeError("a bug")

    monkeypatch.setattr(runner, "screen", boom)
    assert cli(["run", str(path), "-q"]) == 3
    err = capsys.readouterr().err
    where = tmp_path / "out.last-error.log"
    assert str(where) in err
    assert "RuntimeError: a bug" in where.read_text(encoding="utf-8")
    assert not (tmp_path / "out").exists()  # made by the failed run, empty: removed
