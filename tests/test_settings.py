"""One settings spec: validation, command-line parsing, the frozen run settings.

Checks against the config file itself (read independently with tomllib), the
TOML types, and the language's own guarantees (a frozen dataclass refuses
assignment; pickle round-trips equal values).
"""

from __future__ import annotations

import dataclasses
import pickle
import tomllib
from pathlib import Path

import pytest

from corridor.config import load_config
from corridor.errors import ConfigError
from corridor.settings import RUN_SETTINGS, RunSettings, Spec

DEMO = Path(__file__).resolve().parents[1] / "config" / "demo.toml"


def test_spec_checks_type_range_and_choices():
    spec = Spec("span_m", "float", 1.0, low=1.0, high=10.0, unit="m")
    assert spec.validate(5) == (5.0, None)  # a TOML integer is a valid float
    assert isinstance(spec.validate(5)[0], float)
    assert "expected float [m]" in spec.validate("5 m")[1]
    assert "expected float" in spec.validate(True)[1]  # a bool is not a number
    assert "above the valid range [1.0, 10.0]" in spec.validate(11.0)[1]
    assert "below the valid range" in spec.validate(0.5)[1]
    assert "finite" in spec.validate(float("nan"))[1]
    kind = Spec("post_type", "str", choices=("metal", "wood"))
    assert kind.validate("wood") == ("wood", None)
    assert "not one of metal, wood" in kind.validate("steel")[1]
    menu = RUN_SETTINGS["grounding_menu_ohm"]
    assert menu.validate([10, 5]) == ((10.0, 5.0), None)
    assert menu.validate([10, -1])[1] is not None  # a resistance is positive
    formats = RUN_SETTINGS["output_formats"]
    assert formats.validate(["gpkg", "fgb"]) == (("gpkg", "fgb"), None)
    assert "'shp'" in formats.validate(["gpkg", "shp"])[1]


def test_spec_parses_command_line_values():
    assert RUN_SETTINGS["segment_length_m"].parse(" 100 ") == 100.0
    assert RUN_SETTINGS["threads"].parse("2") == 2
    assert RUN_SETTINGS["use_kind_defaults"].parse("false") is False
    assert RUN_SETTINGS["grounding_menu_ohm"].parse("[5, 2.5]") == (5.0, 2.5)
    with pytest.raises(ValueError, match="above the valid range"):
        RUN_SETTINGS["segment_length_m"].parse("5000")
    with pytest.raises(ValueError, match="not a int"):
        RUN_SETTINGS["threads"].parse("two")


def test_run_settings_defaults_are_their_specs_defaults():
    run = RunSettings()
    for name, spec in RUN_SETTINGS.items():
        assert getattr(run, name) == spec.default
        assert spec.validate(spec.default)[1] is None, name  # every default is valid


def test_config_run_is_frozen_typed_and_read_from_the_file():
    cfg = load_config(DEMO)
    with open(DEMO, "rb") as fh:
        raw = tomllib.load(fh)["run"]
    assert isinstance(cfg.run, RunSettings)
    assert cfg.run.frequency_hz == raw["frequency_hz"] == 60.0
    assert cfg.run.tower_span_m == raw["tower_span_m"]
    assert cfg.run.segment_length_m == raw["segment_length_m"]
    assert cfg.run.limit_set == raw["limit_set"]
    assert cfg.run.grounding_menu_ohm == (10.0, 5.0, 2.0, 1.0)  # not in the file: default
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.run.frequency_hz = 50.0  # type: ignore[misc]
    # the record of the resolved config holds plain JSON values
    assert cfg.resolved["run"]["grounding_menu_ohm"] == [10.0, 5.0, 2.0, 1.0]


def test_config_pickles_as_it_is():
    cfg = load_config(DEMO)
    back = pickle.loads(pickle.dumps(cfg))
    assert back == cfg
    assert back.run == cfg.run and back.kind_defaults["fence"] == cfg.kind_defaults["fence"]


def test_with_run_validates_and_records():
    cfg = load_config(DEMO)
    changed = cfg.with_run(segment_length_m=100)
    assert changed.run.segment_length_m == 100.0
    assert changed.resolved["run"]["segment_length_m"] == 100.0
    assert cfg.run.segment_length_m == 50.0  # the original is untouched
    with pytest.raises(ConfigError, match="run.segment_length_m"):
        cfg.with_run(segment_length_m=0.0)
    with pytest.raises(ConfigError, match="run.no_such: unknown setting"):
        cfg.with_run(no_such=1)
