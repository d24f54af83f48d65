"""The shipped cron and systemd examples (deploy/, README "Unattended nightly runs").

Cron starts a job with ``SHELL=/bin/sh``, ``PATH=/usr/bin:/bin``, ``HOME`` and
``LOGNAME`` only (crontab(5), Debian cron), so a job must name the console
script by its absolute path. The cron line is run here exactly so, through
``env -i``, with the path of the console script the install created (found as
the README says: ``sysconfig.get_path('scripts')``). The systemd units are
checked by ``systemd-analyze verify``, which refuses a unit whose ExecStart
program does not exist (systemd-analyze(1)).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sysconfig
from pathlib import Path

import pytest

from corridor.lock import OutputLock

ROOT = Path(__file__).resolve().parents[1]
DEPLOY = ROOT / "deploy"
README = (ROOT / "README.md").read_text(encoding="utf-8")
#: Paths the examples use: the README's install and working folder.
EXAMPLE_SCRIPT = "/opt/corridor/venv/bin/corridor"
EXAMPLE_WORKDIR = "/srv/corridor"
#: The console script of this installation, found as the README says.
SCRIPT = Path(sysconfig.get_path("scripts")) / "corridor"
needs_script = pytest.mark.skipif(
    not SCRIPT.exists(), reason=f"no console script at {SCRIPT}: corridor is not installed"
                                " (python -m pip install -e .)")


def _example(name: str) -> str:
    m = re.search(rf"<!-- README-EXAMPLE: {re.escape(name)} -->\n```[a-z]*\n(.*?)```",
                  README, flags=re.S)
    assert m, name
    return m.group(1)


def _significant(text: str) -> list[str]:
    return [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]


def cron_command() -> str:
    """The command of deploy/corridor.cron's one job (the five time fields dropped)."""
    jobs = _significant((DEPLOY / "corridor.cron").read_text(encoding="utf-8"))
    assert len(jobs) == 1
    fields = jobs[0].split(None, 5)
    assert fields[:5] == ["30", "1", "*", "*", "*"]  # 01:30 every night (crontab(5))
    return fields[5]


def test_readme_shows_the_shipped_examples():
    assert _significant(_example("corridor.cron")) == _significant(
        (DEPLOY / "corridor.cron").read_text(encoding="utf-8"))
    assert _significant(_example("corridor-nightly.service")) == _significant(
        (DEPLOY / "corridor-nightly.service").read_text(encoding="utf-8"))
    # the examples call the script by the absolute path the README's install creates
    assert "python3 -m venv /opt/corridor/venv" in README
    assert f"{EXAMPLE_SCRIPT} run config/network.toml" in cron_command()
    service = (DEPLOY / "corridor-nightly.service").read_text(encoding="utf-8")
    assert f"ExecStart={EXAMPLE_SCRIPT} run config/network.toml" in service
    # a venv's console scripts go into its scripts folder: bin/ on POSIX (sysconfig)
    assert SCRIPT.parent == Path(sysconfig.get_path("scripts"))


def _cron_env(home: Path) -> list[str]:
    return ["env", "-i", "SHELL=/bin/sh", "PATH=/usr/bin:/bin", f"HOME={home}",
            "LOGNAME=corridor"]


def _workdir(tmp_path: Path) -> Path:
    """A working folder as the README lays it out: config/network.toml, outputs in out/."""
    work = tmp_path / "srv"
    (work / "config").mkdir(parents=True)
    text = (ROOT / "config" / "demo.toml").read_text(encoding="utf-8")
    text = text.replace("../sample_layers/", f"{(ROOT / 'sample_layers').as_posix()}/")
    text = text.replace('output_dir = "../out/demo"', 'output_dir = "../out"')
    assert 'output_dir = "../out"' in text
    (work / "config" / "network.toml").write_text(text, encoding="utf-8")
    return work


def _run_cron(command: str, work: Path, home: Path) -> subprocess.CompletedProcess:
    line = command.replace(EXAMPLE_SCRIPT, str(SCRIPT)).replace(EXAMPLE_WORKDIR, str(work))
    return subprocess.run([*_cron_env(home), "sh", "-c", line], capture_output=True,
                          text=True, timeout=600)


def test_a_bare_corridor_is_not_found_under_cron(tmp_path):
    # why the examples name the script's path: cron's PATH lacks the install's bin folder
    if shutil.which("corridor", path="/usr/bin:/bin"):
        pytest.skip("a corridor script is installed in /usr/bin or /bin on this machine")
    proc = subprocess.run([*_cron_env(tmp_path), "sh", "-c", "corridor --version"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 127  # POSIX sh: command not found


@needs_script
def test_cron_line_runs_a_screening_under_crons_environment(tmp_path):
    work = _workdir(tmp_path)
    proc = _run_cron(cron_command(), work, tmp_path)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert proc.stdout == ""  # cron mails any output: a good run is silent on stdout
    for name in ("report.html", "screening.gpkg", "grounding_sites.csv", "CAUTION.txt"):
        assert (work / "out" / name).is_file(), name
    assert not (work / "out.skipped").exists()


@needs_script
def test_cron_line_is_quiet_on_one_skip_and_alerts_on_the_second(tmp_path):
    work = _workdir(tmp_path)
    lock = OutputLock(work / "out")  # a live run of this host holds the output folder
    lock.acquire()
    try:
        first = _run_cron(cron_command(), work, tmp_path)
        assert first.returncode == 0 and first.stdout == ""
        assert (work / "out.skipped").exists()
        second = _run_cron(cron_command(), work, tmp_path)
        assert second.returncode == 4
        assert "corridor skipped twice" in second.stdout  # cron mails it
    finally:
        lock.release()


def _units(tmp_path: Path, script: str) -> Path:
    units = tmp_path / "units"
    units.mkdir(parents=True)
    work = tmp_path / "srv"
    work.mkdir(exist_ok=True)
    for path in DEPLOY.iterdir():
        if path.suffix in (".service", ".timer"):
            text = path.read_text(encoding="utf-8").replace(EXAMPLE_SCRIPT, script)
            (units / path.name).write_text(text.replace(EXAMPLE_WORKDIR, str(work)),
                                           encoding="utf-8")
    return units


def _exec_start(units: Path) -> str:
    text = (units / "corridor-nightly.service").read_text(encoding="utf-8")
    return re.search(r"^ExecStart=(\S+)", text, flags=re.M).group(1)


@needs_script
def test_systemd_units_point_at_the_installed_script(tmp_path):
    units = _units(tmp_path, str(SCRIPT))
    exec_start = Path(_exec_start(units))
    assert exec_start.is_file() and os.access(exec_start, os.X_OK)
    timer = (units / "corridor-nightly.timer").read_text(encoding="utf-8")
    assert "OnCalendar=*-*-* 01:30" in timer and "WantedBy=timers.target" in timer
    analyze = shutil.which("systemd-analyze")
    if analyze is None:
        return  # the parse above is the check where systemd is not installed
    names = sorted(p.name for p in units.iterdir())
    proc = subprocess.run([analyze, "verify", "--man=no", *names], cwd=units,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    # and verify does refuse a unit whose program is missing (the old README's path)
    bad = _units(tmp_path / "bad", "/nonexistent/bin/corridor")
    proc = subprocess.run([analyze, "verify", "--man=no", "corridor-nightly.service"],
                          cwd=bad, capture_output=True, text=True, timeout=120)
    assert proc.returncode != 0
