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
    assert cfg.run.screening_distance_m == 1000.0  # RUN_SETTINGS default
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


# --- config shapes that crashed before (issue 12) ---------------------------------------------

@pytest.mark.parametrize("case, words", [
    ("assets_int", ("layers.assets", "expected [[layers.assets]]")),
    ("run_not_table", ("run", "expected a table")),
    ("layers_not_table", ("layers", "expected a table")),
    ("line_defaults_not_table", ("line_defaults", "expected a table")),
    ("kind_defaults_not_table", ("defaults.fence", "expected a table")),
    ("fields_not_table", ("layers.power_lines.fields", "expected a table")),
    ("kind_list", ("layers.assets[0].kind", "is not one of")),
    ("crs_table", ("layers.power_lines.crs", "not a CRS")),
    ("menu_inf", ("run.grounding_menu_ohm", "positive numbers")),
    ("path_nul", ("layers.power_lines.path", "NUL byte")),
    ("output_dir_nul", ("run.output_dir", "NUL byte")),
    ("layer_nul", ("layers.assets[0].layer", "expected a layer name")),
])
def test_wrong_shapes_are_config_errors(scenario, cli, capsys, case, words):
    """Wrong TOML types anywhere give a ConfigError naming the file and key (the config's
    contract: corridor.config), never a TypeError or AttributeError."""
    cfg = scenario.build()
    if case == "assets_int":
        cfg["layers"]["assets"] = 3
    elif case == "run_not_table":
        cfg["run"] = 3
    elif case == "layers_not_table":
        cfg["layers"] = "everything"
    elif case == "line_defaults_not_table":
        cfg["line_defaults"] = [1, 2]
    elif case == "kind_defaults_not_table":
        cfg["defaults"] = {"fence": 1}
    elif case == "fields_not_table":
        cfg["layers"]["power_lines"]["fields"] = "LINE_ID"
    elif case == "kind_list":
        cfg["layers"]["assets"][0]["kind"] = ["fence"]
    elif case == "crs_table":
        cfg["layers"]["power_lines"]["crs"] = {"epsg": 32633}
    elif case == "menu_inf":
        cfg["run"]["grounding_menu_ohm"] = [10.0, float("inf")]
    elif case == "path_nul":
        cfg["layers"]["power_lines"]["path"] = "power\x00lines.gpkg"
    elif case == "output_dir_nul":
        cfg["run"]["output_dir"] = "o\x00ut"
    elif case == "layer_nul":
        cfg["layers"]["assets"][0]["layer"] = "as\x00sets"
    text = _toml_text_nul(cfg)
    path = scenario.write_config(text)
    _one_naming(_problems(path), "run.toml", *words)
    capsys.readouterr()
    out_cli = scenario.root / "out_cli"
    assert cli(["run", str(path), "--out", str(out_cli)]) == EXIT_INPUT
    assert not out_cli.exists()
    assert words[0] in capsys.readouterr().err


def _toml_text_nul(cfg: dict) -> str:
    """TOML text of ``cfg``; a NUL in a string is written as the escape \\u0000 (TOML 1.0
    basic strings allow it; a raw NUL byte is not valid TOML)."""
    from tests.conftest import toml_text

    return toml_text(cfg).replace("\x00", "\\u0000")


def test_config_not_utf8(scenario, cli, capsys):
    """TOML files are UTF-8 (TOML 1.0 spec): a Latin-1 byte is a ConfigError, not a crash."""
    cfg = scenario.build()
    path = scenario.write_config(cfg)
    path.write_bytes(path.read_bytes() + "# Gr\u00fcnde\n".encode("latin-1"))
    msg = _one_naming(_problems(path), "run.toml", "not UTF-8")
    assert "save it as UTF-8" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "not UTF-8" in err


def test_deeply_nested_toml(scenario, cli, capsys):
    """An array nested 100,000 deep exceeds Python's recursion limit in tomllib; the
    message says so instead of a RecursionError traceback."""
    cfg = scenario.build()
    path = scenario.write_config(cfg)
    depth = 100_000
    path.write_text(path.read_text(encoding="utf-8") + "\n[limits]\nx = " + "[" * depth
                    + "]" * depth + "\n", encoding="utf-8")
    _one_naming(_problems(path), "run.toml", "nested too deeply")
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "nested too deeply" in err


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_nan_or_inf_in_arrangements(scenario, cli, capsys, value):
    """A conductor height of nan or inf (valid TOML 1.0 floats) is refused, naming the
    arrangements file and key."""
    cfg = scenario.build()
    path = scenario.write_config(cfg)
    arr = scenario.arrangements_path
    text = arr.read_text(encoding="utf-8")
    import re

    new, n = re.subn(r"(?m)^(height_m\s*=\s*\[)\s*[-0-9.eE+]+", rf"\g<1>{value}", text, count=1)
    assert n == 1, "the arrangements file has a height_m list"
    arr.write_text(new, encoding="utf-8")
    msg = _one_naming(_problems(path), "arrangements.toml", "height_m", "finite")
    assert value in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "height_m" in err


@pytest.mark.parametrize("mutation", ["circuits_string", "circuit_number", "wires_table",
                                      "arrangements_list"])
def test_arrangement_shapes(scenario, mutation):
    cfg = scenario.build()
    path = scenario.write_config(cfg)
    name = scenario.arrangement
    texts = {
        "circuits_string": f'[arrangements.{name}]\ncircuits = "ABC"\n',
        "circuit_number": f"[arrangements.{name}]\ncircuits = [1, 2]\n",
        "wires_table": (f'[arrangements.{name}]\nearth_wires = {{ x_m = 0 }}\n'
                        f'[[arrangements.{name}.circuits]]\nx_m = [0, 1, 2]\n'
                        "height_m = [20, 20, 20]\nradius_m = 0.01\n"
                        "resistance_ohm_per_km = 0.1\n"),
        "arrangements_list": "arrangements = [1]\n",
    }
    scenario.arrangements_path.write_text(texts[mutation], encoding="utf-8")
    problems = _problems(path)
    assert any("arrangements.toml" in p and "expected" in p for p in problems), problems


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs on this platform")
@pytest.mark.parametrize("which", ["layer", "config", "arrangements"])
def test_fifo_is_refused_not_opened(scenario, cli, capsys, which):
    """Opening a FIFO for reading blocks until a writer comes (POSIX open(2)): a path that
    is not a regular file or folder is refused before it is opened."""
    cfg = scenario.build()
    fifo = scenario.root / "pipe"
    os.mkfifo(fifo)
    if which == "layer":
        cfg["layers"]["assets"][0]["path"] = "pipe"
        path = scenario.write_config(cfg)
        msg = _one_naming(_problems(path), "run.toml", "layers.assets[0].path")
    elif which == "arrangements":
        cfg["run"]["arrangements"] = "pipe"
        path = scenario.write_config(cfg)
        msg = _one_naming(_problems(path), "pipe", "not a regular file")
    else:
        path = fifo
        msg = _one_naming(_problems(path), "pipe", "not a regular file")
    assert "FIFO" in msg
    capsys.readouterr()
    assert cli(["run", str(path), "--out", str(scenario.root / "o")]) == EXIT_INPUT
    assert cli(["check", str(path)]) == EXIT_INPUT
    assert "not a regular file" in capsys.readouterr().err


def test_nul_byte_in_config_path(cli, capsys):
    with pytest.raises(ConfigError) as info:
        load_config("run\x00.toml")
    assert "NUL byte" in str(info.value)
    assert cli(["check", "run\x00.toml"]) == EXIT_INPUT


def test_run_crs_in_feet_refused(scenario, cli, capsys):
    """EPSG:2272 (Pennsylvania South, US survey feet; its unit per PROJ) would make every
    length 3.28 times too large (1 US survey foot = 1200/3937 m, NIST HB 44 App. C):
    refused naming run.crs and the unit."""
    import pyproj

    crs = pyproj.CRS.from_user_input("EPSG:2272")
    assert crs.is_projected and crs.axis_info[0].unit_name == "US survey foot"  # PROJ's view
    cfg = scenario.build()
    cfg["run"]["crs"] = "EPSG:2272"
    path = scenario.write_config(cfg)
    msg = _one_naming(_problems(path), "run.toml", "run.crs", "EPSG:2272")
    assert "US survey foot" in msg and "metre" in msg
    err = _run_exits_2_writes_nothing(cli, scenario, path, capsys)
    assert "run.crs" in err and "US survey foot" in err


def test_accept_rejected_lines_setting(scenario):
    cfg = scenario.build()
    assert load_config(scenario.write_config(cfg)).run.accept_rejected_lines is False
    cfg["run"]["accept_rejected_lines"] = True
    assert load_config(scenario.write_config(cfg)).run.accept_rejected_lines is True
    cfg["run"]["accept_rejected_lines"] = "yes"
    _one_naming(_problems(scenario.write_config(cfg)), "run.accept_rejected_lines", "bool")
