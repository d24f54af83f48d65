"""Unattended runs: atomic publish under kills, locking, incremental reruns, change report.

The scenario is a small invented corridor (one 4 km line, four fences) built
in ``tmp_path`` with the shared :class:`tests.conftest.Scenario` builder.
The checks are facts of the file system and of the run contract, not our
own numbers: a killed writer must leave the previous bytes (SHA-256) in
place; an incremental run must give the rows a fresh full run gives (same
code path on a subset, so exact up to rtol 1e-12: the per-asset results are
claimed independent of the other assets, common practice for a cache
contract); POSIX O_EXCL creation is atomic, so of two runs exactly one
takes the lock.
"""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
import pytest
from pandas.testing import assert_frame_equal
from shapely.geometry import LineString

from corridor.io.outputs import sha256_file
from tests.conftest import X0_M, Y0_M, Scenario

REPO = Path(__file__).resolve().parents[1]
OFFSETS_M = {"F1": 30.0, "F2": 60.0, "F3": 120.0, "F4": 400.0}


def fences(post_ohm: dict | None = None, shift: dict | None = None) -> gpd.GeoDataFrame:
    post_ohm = post_ohm or {}
    shift = shift or {}
    rows, geoms = [], []
    for i, (aid, off) in enumerate(OFFSETS_M.items()):
        x0 = X0_M + 300.0 + 100.0 * i
        pts = [(x0, Y0_M + off), (x0 + 1500.0, Y0_M + off), (x0 + 3000.0, Y0_M + off)]
        if aid in shift:
            pts[1] = (pts[1][0], pts[1][1] + shift[aid])
        geoms.append(LineString(pts))
        rows.append({"AID": aid, "KIND": "fence", "POST_OHM": post_ohm.get(aid, 80.0)})
    return gpd.GeoDataFrame(pd.DataFrame(rows), geometry=geoms, crs="EPSG:32633")


def make(root: Path, out: str = "out", cache: str | None = None, run: dict | None = None,
         **kw) -> Path:
    root.mkdir(parents=True, exist_ok=True)
    sc = Scenario(root)
    cfg = sc.build(assets=fences(**kw))
    cfg["run"]["output_dir"] = out
    # the scenario's design (F1 to F3 exceed, F3 through the induced voltage alone, so it
    # gets grounds): the former fixed 20 % tower share and 100 m tower zone, and 25 kA at
    # both ends, since a fault fed from both ends drives less current through the fences'
    # exposure than the former one-direction 10 kA (docs/methods.md §8)
    cfg["run"].update({"tower_current_share": 0.2, "tower_zone_m": 100.0})
    cfg["line_defaults"] = {"fault_current_start_ka": 25.0, "fault_current_end_ka": 25.0}
    if cache is not None:
        cfg["run"]["cache_dir"] = cache
    cfg["run"].update(run or {})
    return sc.write_config(cfg)


PAUSED_RUN = Path(__file__).resolve().parent / "helpers" / "paused_run.py"


def cli_run(cfg: Path, *args, env=None, wait=True, cwd=None, pause=None):
    """``corridor run cfg *args`` in a subprocess; ``pause=(point, marker, sleep_s)`` runs
    it through tests/helpers/paused_run.py (a hook patched into a production function)."""
    cmd = [sys.executable, "-m", "corridor", "run", str(cfg), *args]
    if pause is not None:
        point, marker, sleep_s = pause
        cmd = [sys.executable, str(PAUSED_RUN), point, str(marker), str(sleep_s), "--",
               "run", str(cfg), *args]
    full_env = {**os.environ, "CORRIDOR_PROGRESS": "0", **(env or {})}
    p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                         env=full_env, cwd=cwd or cfg.parent)
    if not wait:
        return p
    out, err = p.communicate(timeout=120)
    return p.returncode, out, err


def hashes(folder: Path) -> dict[str, str]:
    return {p.name: sha256_file(p) for p in sorted(folder.iterdir()) if p.is_file()}


def wait_for(path: Path, proc, timeout_s: float = 60.0) -> None:
    t0 = time.monotonic()
    while not path.exists():
        if proc.poll() is not None:
            raise AssertionError(f"run ended before the pause point: {proc.stderr.read()}")
        if time.monotonic() - t0 > timeout_s:
            raise AssertionError("pause point not reached")
        time.sleep(0.02)


def layers_equal(a: Path, b: Path) -> None:
    """Every layer of screening.gpkg and every CSV but changes.csv: same rows."""
    la = [str(n) for n in pyogrio.list_layers(a / "screening.gpkg")[:, 0]]
    lb = [str(n) for n in pyogrio.list_layers(b / "screening.gpkg")[:, 0]]
    assert la == lb
    for name in la:
        if name == "layer_styles":  # styles carry their write time (update_time)
            continue
        fa = pyogrio.read_dataframe(a / "screening.gpkg", layer=name)
        fb = pyogrio.read_dataframe(b / "screening.gpkg", layer=name)
        # rtol 1e-12: same arithmetic on a subset; only summation order could differ
        assert_frame_equal(fa.drop(columns="geometry"), fb.drop(columns="geometry"),
                           check_exact=False, rtol=1e-12)
        assert fa.geometry.geom_equals_exact(fb.geometry, 0.0).all(), name
    csvs = sorted(p.name for p in a.glob("*.csv") if p.name != "changes.csv")
    assert csvs == sorted(p.name for p in b.glob("*.csv") if p.name != "changes.csv")
    for name in csvs:
        assert_frame_equal(pd.read_csv(a / name, comment="#"), pd.read_csv(b / name, comment="#"),
                           check_exact=False, rtol=1e-12)


@pytest.mark.slow
def test_kill_midway_leaves_previous_outputs(tmp_path):
    cfg = make(tmp_path / "s")
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    out = tmp_path / "s" / "out"
    before = hashes(out)
    marker = tmp_path / "paused"
    # deterministic kills at named points, then kills after fixed delays
    for point in ("compute", "write"):
        marker.unlink(missing_ok=True)
        p = cli_run(cfg, pause=(point, marker, 60), wait=False)
        wait_for(marker, p)
        p.send_signal(signal.SIGKILL)
        p.wait(timeout=30)
        p.stdout.close()
        p.stderr.close()
        assert hashes(out) == before, point
        pyogrio.read_dataframe(out / "screening.gpkg", layer="segments")  # still opens
    for delay_s in (0.3, 1.0):
        p = cli_run(cfg, wait=False)
        time.sleep(delay_s)
        p.send_signal(signal.SIGKILL)
        p.wait(timeout=30)
        p.stdout.close()
        p.stderr.close()
        # either the kill landed before the swap (old bytes) or the run finished (new
        # outputs, which are byte-identical apart from run.json and the log)
        now = hashes(out)
        same = {k for k in before if now.get(k) == before[k]}
        assert {"exposures.csv", "rejected.csv"} <= same
        pyogrio.read_dataframe(out / "screening.gpkg", layer="segments")
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    leftovers = [p.name for p in out.iterdir() if p.name.startswith(".corridor-staging")
                 or p.name == ".corridor-journal.json"]
    assert leftovers == []
    assert not (tmp_path / "s" / "out.lock").exists()


class _Killed(BaseException):
    """Stands for a SIGKILL inside the publish (nothing after it runs)."""


def test_recover_finishes_a_journal_and_removes_only_marked_staging(tmp_path, monkeypatch):
    """A kill after the publish journal was written: the next run's recovery completes it.

    The kill is simulated inside :func:`corridor.owned.commit` after the first
    file moved. Staging folders carrying corridor's marker are removed; a
    user's folder that merely looks like one (no marker, not empty) and the
    old-style ``.out.tmp-N`` names beside the folder are left alone.
    """
    from corridor import owned
    from corridor.runner import recover

    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    first = owned.make_staging(out)
    (first / "run.json").write_text('{"old": 1}', encoding="utf-8")
    (first / "gone.csv").write_text("old only", encoding="utf-8")
    owned.commit(out, first, {})
    before = owned.owned_files(out)
    assert before.keys() == {"gone.csv", "run.json"}
    staging = owned.make_staging(out)
    (staging / "run.json").write_text('{"new": 1}', encoding="utf-8")
    (staging / "report.html").write_text("<html>new</html>", encoding="utf-8")

    real_replace = os.replace

    def kill_after_first_move(src, dst, *args, **kwargs):  # owned moves with os.replace
        real_replace(src, dst, *args, **kwargs)
        if Path(dst).name != owned.JOURNAL:
            raise _Killed

    monkeypatch.setattr(owned.os, "replace", kill_after_first_move)
    with pytest.raises(_Killed):
        owned.commit(out, staging, before)
    assert (out / owned.JOURNAL).exists()
    monkeypatch.undo()
    # a dead run's marked staging folder, a user's look-alike folder, old-style names beside
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    other = out / f"{owned.STAGING_PREFIX}{int(dead.stdout)}"
    other.mkdir()
    (other / owned.STAGING_MARKER).write_text(json.dumps({"pid": int(dead.stdout)}),
                                              encoding="utf-8")
    (other / "screening.gpkg").write_bytes(b"partial")
    lookalike = out / f"{owned.STAGING_PREFIX}999999"
    lookalike.mkdir()
    (lookalike / "keep.txt").write_text("user", encoding="utf-8")
    (tmp_path / ".out.tmp-1").mkdir()
    (tmp_path / ".out.tmp-1" / "doc.txt").write_text("user", encoding="utf-8")
    recover(out)
    assert (out / "run.json").read_text(encoding="utf-8") == '{"new": 1}'
    assert (out / "report.html").read_text(encoding="utf-8") == "<html>new</html>"
    assert not (out / "gone.csv").exists()  # the old run's file the new run does not write
    now = owned.owned_files(out)
    assert now.keys() == {"report.html", "run.json"}
    assert all(sha256_file(out / n) == r["sha256"] for n, r in now.items())
    assert not (out / owned.JOURNAL).exists() and not staging.exists() and not other.exists()
    assert (lookalike / "keep.txt").read_text(encoding="utf-8") == "user"
    assert (out / "notes.txt").read_text(encoding="utf-8") == "mine"
    assert (tmp_path / ".out.tmp-1" / "doc.txt").read_text(encoding="utf-8") == "user"


@pytest.mark.slow
# partitions: the cache fed by the partitioned local backend (how large runs compute)
@pytest.mark.parametrize("settings", [{}, {"threads": 2, "partitions": 2}],
                         ids=["one-piece", "partitioned"])
def test_incremental_rerun_matches_full_run_and_reports_the_edit(tmp_path, settings):
    cfg = make(tmp_path / "inc", run=settings)
    assert cli_run(cfg)[0] == 0
    # edit one fence: lower post resistance and move a vertex 5 m
    make(tmp_path / "inc", run=settings, post_ohm={"F2": 5.0}, shift={"F2": 5.0})
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    out = tmp_path / "inc" / "out"
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert record["counts"]["assets_recomputed"] == 1
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M) - 1
    full_cfg = make(tmp_path / "full", cache="", post_ohm={"F2": 5.0}, shift={"F2": 5.0})
    assert cli_run(full_cfg)[0] == 0
    full = tmp_path / "full" / "out"
    layers_equal(out, full)
    full_counts = json.loads((full / "run.json").read_text(encoding="utf-8"))["counts"]
    for k, v in full_counts.items():
        if k not in ("assets_recomputed", "assets_from_cache"):
            assert record["counts"][k] == v, k
    changes = pd.read_csv(out / "changes.csv", comment="#")
    f2 = changes[changes["asset_id"] == "F2"]
    if len(f2):  # the edit moved F2's utilization (it usually does at 5 ohm posts)
        assert f2["cause"].str.contains("asset edited").all()
    assert not changes["asset_id"].isin(["F1", "F3", "F4"]).any()
    assert "changes" in record and "inputs_state" in record
    # a rerun with nothing changed computes nothing
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert record["counts"]["assets_recomputed"] == 0
    layers_equal(out, full)


def test_change_report_names_line_attribute(tmp_path):
    from corridor.cli import main

    sc = Scenario(tmp_path)
    cfg = sc.build(assets=fences())
    cfg["layers"]["power_lines"]["fields"].update(fault_current_start_ka="IF_KA",
                                                  fault_current_end_ka="IF_KA")
    lines = sc.line_frame()
    lines["IF_KA"] = 5.0
    sc.write_layer(lines, "power_lines")
    path = sc.write_config(cfg)
    assert main(["run", str(path), "-q"]) == 0
    lines["IF_KA"] = 40.0
    sc.write_layer(lines, "power_lines")
    assert main(["run", str(path), "-q"]) == 0
    changes = pd.read_csv(tmp_path / "out" / "changes.csv", comment="#")
    assert set(changes["asset_id"]) == set(OFFSETS_M)
    assert changes["cause"].str.contains("line L1: fault_current_start_ka 5.0 -> 40.0",
                                         regex=False).all()
    # 8x the terminal fault currents: the fitted sources are 8x stronger but the line's own
    # impedance is unchanged, so the current fed to a fault along the line rises, by less
    # than 8x away from the terminals (docs/methods.md §8.1); the fault touch limit does
    # not depend on it, so every fault-governed utilization rises
    fault = changes[changes["governing_after"].str.contains("fault")]
    ratio = fault["utilization_after"] / fault["utilization_before"]
    assert len(fault) and (ratio > 1.0).all()
    assert set(changes.loc[changes["utilization_before"] < 1, "change"]) <= {"new exceedance"}


def test_two_runs_one_wins_and_stale_lock_taken_over(tmp_path):
    cfg = make(tmp_path / "c")
    marker = tmp_path / "paused"
    first = cli_run(cfg, pause=("compute", marker, 2), wait=False)
    wait_for(marker, first)
    rc, _, err = cli_run(cfg)
    assert rc == 4
    assert f"locked by PID {first.pid} on host" in err and "since" in err
    out, err1 = first.communicate(timeout=60)
    assert first.returncode == 0, err1
    # stale lock: the PID of a process that has ended
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    import socket

    lock = tmp_path / "c" / "out.lock"
    lock.write_text(json.dumps({"pid": int(dead.stdout), "host": socket.gethostname(),
                                "started_utc": "2020-01-01T00:00:00+00:00"}), encoding="utf-8")
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    assert "stale lock" in err
    assert not lock.exists()


def test_lock_is_exclusive_in_process(tmp_path):
    from corridor.lock import LockError, OutputLock

    with OutputLock(tmp_path / "out") as held:
        data = json.loads(held.path.read_text(encoding="utf-8"))
        assert data["pid"] == os.getpid()
        with pytest.raises(LockError, match="locked by PID"):
            # same host, live PID (ours): a second holder is refused
            OutputLock(tmp_path / "out").acquire()
    assert not (tmp_path / "out.lock").exists()


def test_failed_run_keeps_log_and_previous_outputs(tmp_path, cli, capsys):
    cfg = make(tmp_path / "f")
    assert cli(["run", str(cfg), "-q"]) == 0
    out = tmp_path / "f" / "out"
    before = hashes(out)
    assert (out / "corridor.log").exists()
    # break the asset layer: every feature gets an unknown kind -> whole-layer error
    bad = fences()
    bad["KIND"] = "hedge"
    Scenario(tmp_path / "f").write_layer(bad, "assets")
    capsys.readouterr()
    assert cli(["run", str(cfg), "-q"]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert "last-error.log" in err
    assert hashes(out) == before
    text = (tmp_path / "f" / "out.last-error.log").read_text(encoding="utf-8")
    assert "hedge" in text or "no usable asset" in text


# -- lock: heartbeat, other hosts, empty files, unlock ------------------------------------

def _foreign_lock(path: Path, age_s: float, host: str = "another-host") -> None:
    path.write_text(json.dumps({"pid": 4242, "host": host,
                                "started_utc": "2026-01-01T01:30:00+00:00"}), encoding="utf-8")
    old = time.time() - age_s
    os.utime(path, (old, old))


def test_lock_of_another_host_is_taken_over_only_without_heartbeat(tmp_path):
    """Another host's lock: refused while its heartbeat is fresh, stale after STALE_AFTER_S."""
    from corridor.lock import STALE_AFTER_S, LockError, OutputLock

    lock = tmp_path / "out.lock"
    _foreign_lock(lock, age_s=5.0)
    with pytest.raises(LockError, match="locked by PID 4242 on host another-host"):
        OutputLock(tmp_path / "out").acquire()
    _foreign_lock(lock, age_s=STALE_AFTER_S + 60.0)  # e.g. an OOM-killed container
    with OutputLock(tmp_path / "out") as held:
        assert json.loads(lock.read_text(encoding="utf-8"))["pid"] == os.getpid()
        assert held.still_held()
    assert not lock.exists()


def test_heartbeat_refreshes_the_lock_file(tmp_path):
    from corridor.lock import OutputLock

    with OutputLock(tmp_path / "out", heartbeat_s=0.05) as held:
        old = time.time() - 3600.0
        os.utime(held.path, (old, old))
        t0 = time.monotonic()
        while held.path.stat().st_mtime < old + 60.0 and time.monotonic() - t0 < 30.0:
            time.sleep(0.02)
        assert held.path.stat().st_mtime > old + 60.0  # refreshed by the daemon thread


def test_empty_lock_file_is_stale_after_a_few_seconds(tmp_path):
    """The 0-bytes-free case: an empty lock file must not block later runs for good."""
    from corridor.lock import UNREADABLE_STALE_S, LockError, OutputLock

    lock = tmp_path / "out.lock"
    lock.write_bytes(b"")
    with pytest.raises(LockError, match="being written"):
        OutputLock(tmp_path / "out").acquire()
    old = time.time() - UNREADABLE_STALE_S - 1.0
    os.utime(lock, (old, old))
    with OutputLock(tmp_path / "out"):
        pass
    assert not lock.exists()


def test_lock_write_failure_leaves_no_lock_file(tmp_path, monkeypatch):
    import corridor.lock as lock_mod

    def full(*a, **kw):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(lock_mod.json, "dump", full)
    with pytest.raises(OSError, match="No space left"):
        lock_mod.OutputLock(tmp_path / "out").acquire()
    assert not (tmp_path / "out.lock").exists()


def test_unlock_prints_the_holder_and_removes_the_lock(tmp_path, cli, capsys):
    cfg = make(tmp_path / "c")
    lock = tmp_path / "c" / "out.lock"
    _foreign_lock(lock, age_s=30.0)
    assert cli(["run", str(cfg), "-q"]) == 4
    assert "corridor unlock" in capsys.readouterr().err
    assert cli(["unlock", str(cfg)]) == 0
    printed = capsys.readouterr().out
    assert "PID 4242 on host another-host" in printed and "removed" in printed
    assert not lock.exists()
    assert cli(["unlock", str(cfg)]) == 0
    assert "nothing to do" in capsys.readouterr().out
    # a holder running on this host (this test's own process) needs --force
    import socket

    _foreign_lock(lock, age_s=1.0, host=socket.gethostname())
    lock.write_text(json.dumps({"pid": os.getpid(), "host": socket.gethostname()}),
                    encoding="utf-8")
    assert cli(["unlock", str(cfg)]) == 4
    assert lock.exists()
    assert cli(["unlock", str(cfg), "--force"]) == 0
    assert not lock.exists()
