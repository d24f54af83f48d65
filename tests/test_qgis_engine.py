"""The corridor side of the QGIS plugin, without QGIS: the job's derived config.

The reference for the TOML text is Python's own TOML parser (tomllib, TOML 1.0):
what the engine writes must parse back to the same data.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from corridor.config import load_config
from corridor.errors import ConfigError
from corridor.qgis.adapter import algorithm_specs
from corridor.qgis.engine import derived_config, toml_text
from corridor.steps.catalog import step_names

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"


def test_toml_text_parses_back_to_the_same_data():
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data["run"]["note"] = 'quote " backslash \\ tab \t é'
    data["layers"]["assets"][0]["osm"] = {"fence": {"select": ["barrier=fence"],
                                                     "values": {"post_type": {"tag": "m"}}}}
    data["limits"] = {"criteria": {"touch_fault": {"body_weight_kg": 70.0}}}
    assert tomllib.loads(toml_text(data)) == data


def test_derived_config_replaces_layers_and_keeps_the_rest(tmp_path):
    gpkg = tmp_path / "copy.gpkg"
    gpkg.write_bytes((REPO / "sample_layers" / "brackenford_vale.gpkg").read_bytes())
    job = {"mode": "run", "config": str(DEMO), "params": {"screening_distance_m": 800.0},
           "layers": {"power_lines": {"path": str(gpkg), "layer": "power_lines"},
                      "assets": [{"path": str(gpkg), "layer": n}
                                 for n in ("pipelines", "rails", "fences", "telecom")]}}
    folder = tmp_path / "job"
    folder.mkdir()
    cfg = load_config(derived_config(job, folder))
    ref = load_config(DEMO)
    assert cfg.power_lines.path == gpkg and cfg.power_lines.fields == ref.power_lines.fields
    assert [a.kind for a in cfg.assets] == [a.kind for a in ref.assets]
    assert all(a.path == gpkg for a in cfg.assets)
    assert cfg.soil.path == ref.soil.path  # not chosen in QGIS: the config's
    assert cfg.arrangements_path == ref.arrangements_path
    assert cfg.run.screening_distance_m == 800.0
    assert cfg.output_dir == ref.output_dir  # relative paths made absolute
    same = set(ref.run.as_dict()) - {"screening_distance_m", "output_dir", "arrangements"}
    assert {k: getattr(cfg.run, k) for k in same} == {k: getattr(ref.run, k) for k in same}


def test_wrong_number_of_asset_layers_is_a_config_error(tmp_path):
    job = {"mode": "run", "config": str(DEMO), "layers": {"assets": [{"path": "x.gpkg"}]}}
    with pytest.raises(ConfigError) as exc:
        derived_config(job, tmp_path)
    assert "parameter assets: 1 layer(s) chosen" in exc.value.problems[0]
    assert "4 [[layers.assets]]" in exc.value.problems[0]


def test_one_algorithm_per_step_plus_the_whole_run():
    algs = algorithm_specs()
    assert [a["id"] for a in algs] == ["screen", *step_names()]
    screen = algs[0]
    labels = {p["name"]: p["label"] for p in screen["parameters"]}
    # unit and bounds of RUN_SETTINGS in the label
    assert labels["screening_distance_m"] == "Screening distance m [m] (1 – 5000)"
    kinds = {p["name"]: p["kind"] for p in screen["parameters"]}
    assert kinds["use_kind_defaults"] == "bool" and kinds["grounding_menu_ohm"] == "list"
    # the limit set is picked from the shipped sets (config/limits/*.toml)
    limit = next(p for p in screen["parameters"] if p["name"] == "limit_set")
    assert limit["kind"] == "choice"
    assert {"iec_en", "ieee_na"} <= set(limit["choices"])
    formats = next(p for p in screen["parameters"] if p["name"] == "output_formats")
    assert formats["kind"] == "multichoice" and "gpkg" in formats["choices"]
    geo = {i["name"]: (i["geometry"], i["multiple"]) for i in screen["inputs"]}
    assert geo == {"power_lines": ("line", False), "assets": ("line", True),
                   "soil": ("polygon", False), "grounds": ("point", False),
                   "towers": ("point", False)}
