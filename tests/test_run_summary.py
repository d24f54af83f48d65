"""The log and the final summary of a run name the published files, never the staging folder.

A run writes into a staging folder inside the output folder and moves the files
into place when it publishes (README "Unattended nightly runs"); a user reading
the log must be sent to where the files are after the run, not to a folder that
no longer exists (project rule: outputs are named by where the user finds them).
"""

from __future__ import annotations

import logging
import re
from pathlib import Path

from corridor.cli import main

ROOT = Path(__file__).resolve().parents[1]


def test_log_and_summary_name_published_paths(tmp_path, capsys):
    out = tmp_path / "out"
    try:
        assert main(["run", str(ROOT / "config" / "demo.toml"), "--out", str(out)]) == 0
    finally:
        for h in list(logging.getLogger("corridor").handlers):
            logging.getLogger("corridor").removeHandler(h)
    console = capsys.readouterr().err
    log_text = (out / "corridor.log").read_text(encoding="utf-8")
    for text in (console, log_text):
        assert ".corridor-staging" not in text
    # the report's own line, in the console and in corridor.log, names its published path
    for text in (console, log_text):
        assert f"report written to {out.resolve() / 'report.html'}" in text
    # the final summary: one line per main output, each an existing published file
    summary = dict(re.findall(r"^corridor: INFO:   ([a-z ]+): (\S+)$", console, flags=re.M))
    assert summary["report"] == str(out.resolve() / "report.html")
    assert summary["grounding work list"] == str(out.resolve() / "grounding_sites.csv")
    assert summary["layers"] == str(out.resolve() / "screening.gpkg")
    for path in summary.values():
        assert Path(path).is_file(), path
        assert Path(path).parent == out.resolve()
    assert not list(out.glob(".corridor-staging*"))
