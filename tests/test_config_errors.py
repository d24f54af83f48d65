"""Bad run configurations: each gets a clear error naming the file and key.

The reference for what is wrong is the config's own contract (the TOML 1.0
spec for syntax, corridor.config.RUN_SETTINGS for names, types and ranges,
corridor.schema for field names) and, for CRS kinds, PROJ via pyproj. Every
case is checked twice: ``load_config`` raises :class:`ConfigError` with the
key in ``.problems``, and ``corridor run`` exits 2 with nothing written.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from corridor import __version__
from corridor.config import load_config
from corridor.errors import ConfigError, InputError

EXIT_INPUT = 2  # corridor.cli: bad config or input


def _problems(path) -> list[str]:
    with pytest.raises(ConfigError) as info:
        load_config(path)
    problems = info.value.problems
    assert problems, "a ConfigError must list at least one problem"
    return problems


def _one_naming(problems: list[str], *words: str) -> str:
    """The single problem message that contains every one of ``words``."""
    hits = [p for p in problems if all(w in p for w in words)]
    assert hits, f"no problem names {words}: {problems}"
    return hits[0]


def _run_exits_2_writes_nothing(cli, scenario, cfg_path, capsys) -> str:
    """``corridor run`` exits 2; neither the config's nor --out's folder appears."""
    out_cli = scenario.root / "out_cli"
    assert cli(["run", str(cfg_path), "--out", str(out_cli)]) == EXIT_INPUT
    assert not out_cli.exists()
    assert cli(["run", str(cfg_path)]) == EXIT_INPUT
    assert not (scenario.root / "out").exists()  # run.output_dir of the scenario config
    assert not (scenario.root / "corridor-crash.log").exists()  # a user error, not a crash
    return capsys.readouterr().err


# --- one bad key at a time -------------------------------------------------------------------

def test_unknown_top_level_section(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["output"] = {"folder": "x"}  # not a section of the config
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "output", "unknown section")
    assert "run" in msg and "layers" in msg  # lists the allowed sections
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "output: unknown section" in err


def test_unknown_run_key_wrong_unit(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["run"]["screening_distance_km"] = 1.0  # the setting is screening_distance_m
    path = scenario.write_config(cfg)
    _one_naming(_problems(path), "run.toml", "run.screening_distance_km", "unknown")
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "run.screening_distance_km" in err


def test_wrong_type_string_with_unit(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["run"]["segment_length_m"] = "50 m"  # a number is expected; the unit is in the name
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "run.segment_length_m")
    assert "expected float" in msg and "'50 m'" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "run.segment_length_m" in err


def test_out_of_range_screening_distance(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["run"]["screening_distance_m"] = 9000.0  # above the 5 km ceiling of RUN_SETTINGS
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "run.screening_distance_m")
    assert "9000" in msg and "5000" in msg and "range" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "run.screening_distance_m" in err


def test_missing_layer_file(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["layers"]["assets"][0]["path"] = "no_such_assets.gpkg"
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "layers.assets[0].path", "not found")
    assert "no_such_assets.gpkg" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "no_such_assets.gpkg" in err


def test_unknown_field_mapping_key(scenario, cli, capsys):
    cfg = scenario.build()
    # corridor's field is post_resistance_ohm; a unit-less name is not a corridor field
    cfg["layers"]["assets"][0]["fields"]["post_resistance"] = "POST_OHM"
    path = scenario.write_config(cfg)
    _one_naming(_problems(path), "run.toml", "layers.assets[0].fields.post_resistance",
                "unknown corridor field")
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "fields.post_resistance" in err


def test_geographic_run_crs_rejected(scenario, cli, capsys):
    import pyproj

    # PROJ's own view: EPSG:4326 is geographic (degrees), not projected
    assert not pyproj.CRS.from_user_input("EPSG:4326").is_projected
    cfg = scenario.build()
    cfg["run"]["crs"] = "EPSG:4326"
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "run.crs", "EPSG:4326")
    assert "not a projected" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "run.crs" in err


def test_invalid_toml(scenario, cli, capsys):
    cfg_text = '[run]\nsegment_length_m = 50.0\n[layers.power_lines\npath = "x"\n'  # no "]"
    path = scenario.write_config(cfg_text)
    msg = _one_naming(_problems(path), "run.toml", "not valid TOML")
    assert "line 3" in msg  # tomllib reports where the syntax breaks
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "not valid TOML" in err


def test_missing_config_file(scenario, cli, capsys):
    path = scenario.root / "absent.toml"
    _one_naming(_problems(path), "absent.toml", "not found")
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "absent.toml" in err


def test_undefined_arrangement_is_input_error(scenario, cli, capsys):
    """A line naming an arrangement the arrangements file lacks: InputError at read time."""
    from corridor.io.layers import read_inputs

    lines = scenario.line_frame()
    lines["TOWER"] = ["no_such_tower"]
    path = scenario.write_config(scenario.build(lines=lines))
    cfg = load_config(path)  # the config itself is valid
    with pytest.raises(InputError) as info:
        read_inputs(cfg)
    msg = _one_naming(info.value.problems, "no_such_tower", "arrangements.toml")
    assert "power_lines.gpkg:power_lines" in msg  # names the layer too
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "no_such_tower" in err


# --- all problems in one pass -----------------------------------------------------------------

def test_several_problems_reported_together(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["bogus"] = {"a": 1}
    cfg["run"]["screening_distance_km"] = 1.0
    cfg["run"]["segment_length_m"] = "50 m"
    cfg["run"]["screening_distance_m"] = 9000.0
    cfg["run"]["crs"] = "EPSG:4326"
    cfg["layers"]["power_lines"]["path"] = "missing_lines.gpkg"
    cfg["layers"]["assets"][0]["fields"]["post_resistance"] = "POST_OHM"
    path = scenario.write_config(cfg)
    problems = _problems(path)
    expected = ["bogus", "run.screening_distance_km", "run.segment_length_m",
                "run.screening_distance_m", "run.crs", "layers.power_lines.path",
                "fields.post_resistance"]
    for key in expected:
        _one_naming(problems, "run.toml", key)
    assert len(problems) == len(expected)  # one message each, no duplicates or noise
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    for key in expected:
        assert key in err


def test_config_is_valid_baseline(scenario):
    """The untouched scenario config loads: the errors above come from the one change."""
    cfg = load_config(scenario.write_config(scenario.build()))
    assert cfg.run["screening_distance_m"] == 1000.0  # RUN_SETTINGS default
    assert scenario.arrangement in cfg.arrangements


# --- the CLI shell -----------------------------------------------------------------------------

def test_subprocess_run_exits_2_and_writes_nothing(scenario):
    cfg = scenario.build()
    cfg["run"]["screening_distance_km"] = 1.0
    path = scenario.write_config(cfg)
    out = scenario.root / "out_sub"
    env = {**os.environ, "PYTHONWARNINGS": "error"}
    proc = subprocess.run([sys.executable, "-m", "corridor", "run", str(path), "--out", str(out)],
                          capture_output=True, text=True, cwd=scenario.root, env=env,
                          timeout=60)
    assert proc.returncode == EXIT_INPUT, proc.stderr
    assert "run.screening_distance_km" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert proc.stdout == ""
    assert not out.exists()
    assert not (scenario.root / "out").exists()


def test_check_command_exits_2_on_bad_config(scenario, cli, capsys):
    cfg = scenario.build()
    cfg["run"]["segment_length_m"] = "50 m"
    assert cli(["check", str(scenario.write_config(cfg))]) == EXIT_INPUT
    assert "run.segment_length_m" in capsys.readouterr().err


def test_version(cli, capsys):
    with pytest.raises(SystemExit) as info:
        cli(["--version"])
    assert info.value.code == 0
    assert capsys.readouterr().out.strip() == f"corridor {__version__}"


def test_help(cli, capsys):
    with pytest.raises(SystemExit) as info:
        cli(["--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert "run" in out and "check" in out
