"""Checks of the load series file and the [load_series] section: every bad row named, none lost.

The rules are the project's input rules (README, Load time series): a bad row
is listed with its file, row and field and never silently dropped; a gap is
filled conservatively (the circuit's largest current in the series) and
listed; a missing column or section key is a clear configuration error.
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from corridor.config import load_config
from corridor.errors import ConfigError, InputError
from corridor.series.settings import SeriesSettings
from corridor.series.table import read_load_series

ROOT = Path(__file__).resolve().parents[1]
LINES = {"L1": 2, "L2": 1}


def _read(tmp_path, text, name="s.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    st = SeriesSettings(path, "csv", sha256=hashlib.sha256(path.read_bytes()).hexdigest())
    return read_load_series(st, LINES)


def _by(problems, field):
    return [p for p in problems if p["field"] == field]


def test_clean_series_on_an_hourly_grid(tmp_path):
    s = _read(tmp_path, "timestamp,line_id,circuit,current_a\n"
              "2026-01-01T00:00:00Z,L1,1,100\n2026-01-01T01:00:00Z,L1,1,120\n"
              "2026-01-01T00:00:00Z,L2,,50\n2026-01-01T01:00:00Z,L2,,55\n")
    assert s.n_steps == 2 and s.step_h == 1.0
    assert s.keys == [("L1", 1), ("L2", 0)]
    assert np.array_equal(s.current_a, [[100, 120], [50, 55]])
    assert [p["action"] for p in s.problems] == []
    assert s.rows_read == s.rows_used == 4


def test_bad_rows_are_listed_with_file_row_and_field(tmp_path):
    s = _read(tmp_path, "timestamp,line_id,circuit,current_a\n"
              "2026-01-01T00:00:00Z,L1,1,100\n"       # row 1
              "2026-01-01T01:00:00Z,L1,1,-5\n"        # row 2: negative
              "2026-01-01T02:00:00Z,LX,1,10\n"        # row 3: unknown line
              "2026-01-01T02:00:00Z,L1,1,130\n"       # row 4
              "2026-01-01T02:00:00Z,L1,1,131\n"       # row 5: duplicate of row 4
              "2026-01-01T01:30:00Z,L1,1,90\n"        # row 6: backwards
              "2026-01-01T03:00:00Z,L1,3,90\n"        # row 7: L1 has 2 circuits
              "yesterday,L1,1,90\n"                   # row 8: not a time
              "2026-01-01T03:00:00Z,L1,1,abc\n")      # row 9: not a number
    rejected = [p for p in s.problems if p["action"] == "rejected"]
    rows = {p["row"].split(" (")[0]: p for p in rejected}
    assert set(rows) == {"row 2", "row 3", "row 5", "row 6", "row 7", "row 8", "row 9"}
    assert all(p["file"] == "s.csv" for p in s.problems)
    assert rows["row 2"]["field"] == "current_a" and "negative" in rows["row 2"]["reason"]
    assert rows["row 2"]["row"] == "row 2 (line 3 of the file)"
    assert rows["row 3"]["field"] == "line_id" and "'LX'" in rows["row 3"]["reason"]
    assert "duplicate timestamp" in rows["row 5"]["reason"] and "row 4" in rows["row 5"]["reason"]
    assert "time goes backwards" in rows["row 6"]["reason"]
    assert rows["row 7"]["field"] == "circuit" and "2 circuits" in rows["row 7"]["reason"]
    assert rows["row 8"]["field"] == "timestamp"
    assert rows["row 9"]["field"] == "current_a"
    assert s.rows_read == 9 and s.rows_used == 2
    # the rejected 01:00 value leaves a gap: filled with the largest current and listed
    filled = [p for p in s.problems if p["action"] == "filled"]
    assert len(filled) == 2 and all("130 A" in p["reason"] for p in filled)
    assert "from 2026-01-01T01:00:00Z to 2026-01-01T01:00:00Z (1 step)" in filled[0]["reason"]
    assert np.array_equal(s.current_a[0], [100, 130, 130, 130])  # 03:00 too (rows 7, 9)
    # L2 has no rows: the layer's load, said so
    notes = [p for p in s.problems if p["action"] == "note"]
    assert len(notes) == 1 and "'L2'" in notes[0]["reason"]


def test_gap_in_the_time_axis_is_filled_conservatively_and_listed(tmp_path):
    s = _read(tmp_path, "timestamp,line_id,current_a\n"
              "2026-01-01T00:00:00Z,L2,10\n2026-01-01T01:00:00Z,L2,40\n"
              "2026-01-01T02:00:00Z,L2,20\n2026-01-01T05:00:00Z,L2,30\n"
              "2026-01-01T06:00:00Z,L2,30\n")
    assert s.n_steps == 7
    assert np.array_equal(s.current_a[0], [10, 40, 20, 40, 40, 30, 30])
    gap = _by(s.problems, "current_a")
    assert len(gap) == 1 and gap[0]["action"] == "filled" and "(2 steps)" in gap[0]["reason"]


def test_off_grid_row_is_rejected(tmp_path):
    s = _read(tmp_path, "timestamp,line_id,current_a\n"
              "2026-01-01T00:00:00Z,L2,10\n2026-01-01T01:00:00Z,L2,10\n"
              "2026-01-01T02:00:00Z,L2,10\n2026-01-01T02:20:00Z,L2,10\n")
    bad = [p for p in s.problems if p["action"] == "rejected"]
    assert len(bad) == 1 and bad[0]["row"].startswith("row 4") and "grid" in bad[0]["reason"]


def test_missing_column_names_the_file(tmp_path):
    with pytest.raises(InputError, match=r"s\.csv: missing column\(s\) current_a"):
        _read(tmp_path, "timestamp,line_id,amps\n2026-01-01T00:00:00Z,L2,10\n")


def test_no_usable_row_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="no usable row"):
        _read(tmp_path, "timestamp,line_id,current_a\n2026-01-01T00:00:00Z,L9,10\n")


def test_parquet_reads_like_csv(tmp_path):
    frame = pd.DataFrame({"timestamp": ["2026-01-01T00:00:00Z", "2026-01-01T01:00:00Z"],
                          "line_id": ["L2", "L2"], "current_a": [5.0, 6.0]})
    path = tmp_path / "s.parquet"
    frame.to_parquet(path)
    s = read_load_series(SeriesSettings(path, "parquet"), LINES)
    assert np.array_equal(s.current_a, [[5.0, 6.0]])
    assert s.problems[0]["row"] == ""  # only the note on L1, no row


def _config_with(tmp_path, section: str) -> Path:
    text = (ROOT / "config" / "demo.toml").read_text(encoding="utf-8")
    text = text.replace('"../sample_layers/', f'"{ROOT / "sample_layers"}/')
    text = text.replace('"../out/demo"', f'"{tmp_path / "out"}"')
    path = tmp_path / "c.toml"
    path.write_text(text + "\n[load_series]\n" + section, encoding="utf-8")
    return path


def test_section_problems_name_the_key(tmp_path):
    with pytest.raises(ConfigError) as err:
        load_config(_config_with(tmp_path, 'path = "nope.csv"\nperiod_h = -1\nwindow = 3\n'
                                 'averaging = "mean"\n'))
    text = "\n".join(err.value.problems)
    assert "load_series.path" in text and "file not found" in text
    assert "load_series.period_h" in text
    assert "load_series.window: unknown key" in text
    assert "load_series.averaging" in text


def test_section_is_resolved_with_the_file_hash(tmp_path):
    series = ROOT / "sample_layers" / "brackenford_vale_loads.csv"
    cfg = load_config(_config_with(tmp_path, f'path = "{series}"\nperiod_h = 12\n'))
    assert cfg.load_series.period_h == 12.0
    assert cfg.resolved["load_series"]["sha256"] == hashlib.sha256(
        series.read_bytes()).hexdigest()


def test_cli_exits_2_on_a_series_without_its_columns(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("time,line,amps\n2026-01-01T00:00:00Z,VPC-138-B,1\n", encoding="utf-8")
    path = _config_with(tmp_path, f'path = "{bad}"\n')
    done = subprocess.run([sys.executable, "-m", "corridor", "run", str(path)],
                          capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert done.returncode == 2
    assert "bad.csv: missing column(s) timestamp, line_id, current_a" in done.stderr


def test_check_and_run_refuse_a_series_without_its_columns_before_computing(
        tmp_path, monkeypatch, capsys):
    # `corridor check` reads the load series as the run does (common practice: a check
    # that passes what the run refuses is a false all-clear); the run refuses it before
    # computing anything, not after the per-asset work.
    import corridor.backends as backends
    from corridor.cli import main

    bad = tmp_path / "bad.csv"
    bad.write_text("time,line,amps\n2026-01-01T00:00:00Z,VPC-138-B,1\n", encoding="utf-8")
    path = _config_with(tmp_path, f'path = "{bad}"\n')
    assert main(["check", str(path)]) == 2
    assert "bad.csv: missing column(s) timestamp, line_id, current_a" in capsys.readouterr().err

    def no_compute(*args, **kwargs):
        raise AssertionError("computed before the load series was checked")

    monkeypatch.setattr(backends, "compute_function", lambda *a, **k: no_compute)
    assert main(["run", str(path), "-q"]) == 2
    assert "bad.csv: missing column(s)" in capsys.readouterr().err
