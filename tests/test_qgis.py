"""corridor's QGIS Processing provider, in a real headless QGIS.

The plugin zip is built as a user builds it (``corridor qgis-plugin --zip``),
unpacked into a plugins folder and driven by tests/qgis_driver.py under the
Python QGIS uses (/usr/bin/python3 on Debian: python3-qgis), started as a
subprocess because the project's Python cannot import QGIS. The plugin runs
the screening in the project's Python (engine.json), so the reference for
every output is corridor itself: the CLI run and :func:`run_step` on the same
config.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pandas as pd
import pyogrio
import pytest

from corridor.cli import main as cli_main
from corridor.io.outputs import read_csv
from corridor.qgis.build import PLUGIN_ID, build_zip
from corridor.steps.catalog import run_step, step_names

pytestmark = pytest.mark.qgis

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
GPKG = REPO / "sample_layers" / "brackenford_vale.gpkg"
QGIS_PYTHON = "/usr/bin/python3"
DRIVER = Path(__file__).with_name("qgis_driver.py")
SCREENSHOT = REPO / "docs" / "qgis_screen_corridor.png"


def _qgis_env() -> dict:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env["QT_QPA_PLATFORM"] = "offscreen"
    env.setdefault("XDG_RUNTIME_DIR", "/tmp/runtime-" + str(os.getuid()))
    return env


def _qgis_missing() -> str | None:
    if not Path(QGIS_PYTHON).exists():
        return f"{QGIS_PYTHON} not found (QGIS's Python)"
    proc = subprocess.run([QGIS_PYTHON, "-c", "import qgis.core"], capture_output=True,
                          text=True, env=_qgis_env(), timeout=120)
    if proc.returncode:
        return ("QGIS cannot be imported by the system Python (install the Debian packages"
                f" python3-qgis and qgis-providers): {proc.stderr.strip()[-300:]}")
    return None


def _layer(name: str) -> str:
    return f"{GPKG}|layername={name}"


@pytest.fixture(scope="module")
def qgis_run(tmp_path_factory):
    missing = _qgis_missing()
    if missing:
        pytest.skip(missing)
    tmp = tmp_path_factory.mktemp("qgis")
    zip_path = build_zip(tmp / "corridor_qgis.zip", python=sys.executable, pythonpath=str(REPO))
    plugins = tmp / "plugins"
    with zipfile.ZipFile(zip_path) as z:
        z.extractall(plugins)
    cli_out = tmp / "cli_out"
    cli_code = cli_main(["run", str(DEMO), "--out", str(cli_out), "-q"])
    step_out = tmp / "step_ref"
    run_step("expose", DEMO, outputs_dir=step_out, params={"screening_distance_m": 500.0})
    layers = {"power_lines": _layer("power_lines"),
              "assets": [_layer("pipelines"), _layer("rails"),
                         {"memory": _layer("fences"), "name": "fences in memory"},
                         _layer("telecom")],
              "soil": _layer("soil"), "grounds": _layer("grounds")}
    qgis_out = tmp / "qgis_out"
    bad_lines = {"memory": _layer("power_lines"), "name": "lines without KV",
                 "drop_field": "KV"}
    actions = [
        {"do": "list"},
        {"do": "run", "algorithm": "corridor:screen", "layers": layers,
         "params": {"CONFIG": str(DEMO), "OUTPUT": str(qgis_out)}},
        {"do": "run", "algorithm": "corridor:screen", "layers": layers, "cancel_at": 20.0,
         "params": {"CONFIG": str(DEMO), "OUTPUT": str(qgis_out)}},
        {"do": "run", "algorithm": "corridor:screen", "layers": {**layers,
                                                                 "power_lines": bad_lines},
         "params": {"CONFIG": str(DEMO), "OUTPUT": str(tmp / "bad_out")}},
        {"do": "run", "algorithm": "corridor:expose", "layers": {},
         "params": {"CONFIG": str(DEMO), "OUTPUT": str(tmp / "step_out"),
                    "screening_distance_m": 500.0}},
        {"do": "render", "png": str(tmp / "screen.png"), "size": [1000, 700],
         "layers": [[f"{qgis_out}/screening.gpkg|layername=power_lines", "power lines"],
                    [f"{qgis_out}/screening.gpkg|layername=assets", "assets"],
                    [f"{qgis_out}/screening.gpkg|layername=hazards", "hazards"],
                    [f"{qgis_out}/screening.gpkg|layername=sites", "sites"]]},
    ]
    bad_cfg = tmp / "bad_config.toml"
    bad_cfg.write_text(DEMO.read_text(encoding="utf-8")
                       .replace("../sample_layers/", f"{GPKG.parent.as_posix()}/")
                       .replace("[run]\n", "[run]\ntower_spam_m = 300.0\n"), encoding="utf-8")
    actions.append({"do": "run", "algorithm": "corridor:screen", "layers": {},
                    "params": {"CONFIG": str(bad_cfg), "OUTPUT": str(tmp / "bad_cfg_out")}})
    task = tmp / "task.json"
    task.write_text(json.dumps({"actions": actions}), encoding="utf-8")
    result = tmp / "result.json"
    proc = subprocess.run([QGIS_PYTHON, str(DRIVER), str(plugins), str(task), str(result)],
                          capture_output=True, text=True, env=_qgis_env(), timeout=1200)
    assert proc.returncode == 0, proc.stderr[-3000:]
    res = json.loads(result.read_text(encoding="utf-8"))
    return {"tmp": tmp, "cli_out": cli_out, "cli_code": cli_code, "qgis_out": qgis_out,
            "step_ref": step_out, "list": res[0]["algorithms"], "screen": res[1],
            "cancel": res[2], "bad": res[3], "step": res[4], "render": res[5],
            "bad_config": res[6]}


def test_provider_lists_one_algorithm_per_step(qgis_run):
    algs = qgis_run["list"]
    # one algorithm per declared step of the catalog, plus the whole run
    assert set(algs) == {f"corridor:{n}" for n in step_names()} | {"corridor:screen"}
    screen = algs["corridor:screen"]
    assert screen["name"] == "Screen corridor"
    params = screen["parameters"]
    assert params["CONFIG"]["type"] == "file"
    assert params["power_lines"]["type"] == "vector"
    assert params["assets"]["type"] == "multilayer"
    assert params["soil"]["type"] == "vector"
    assert params["OUTPUT"]["type"] == "folderDestination"
    # units and bounds of the catalog (RUN_SETTINGS) in the labels
    assert params["screening_distance_m"]["type"] == "number"
    assert "[m]" in params["screening_distance_m"]["label"]
    assert "(1 – 5000)" in params["screening_distance_m"]["label"]
    assert "[Hz]" in params["frequency_hz"]["label"]
    assert params["limit_set"]["type"] == "enum"  # the registry's limit sets
    assert params["use_kind_defaults"]["type"] == "enum"  # from the config / true / false
    assert {"hazards", "assets", "sites", "report"} <= set(screen["outputs"])


def _same_table(a: pd.DataFrame, b: pd.DataFrame, skip=("source_layer", "layer")) -> None:
    cols = [c for c in a.columns if c not in skip and c != "geometry"]
    assert cols == [c for c in b.columns if c not in skip and c != "geometry"]
    pd.testing.assert_frame_equal(a[cols].reset_index(drop=True), b[cols].reset_index(drop=True),
                                  check_dtype=False)


def test_screen_corridor_outputs_equal_the_cli(qgis_run):
    screen = qgis_run["screen"]
    assert screen["ok"], screen
    assert qgis_run["cli_code"] == 0
    cli, qg = qgis_run["cli_out"], qgis_run["qgis_out"]
    for name in ("exposures.csv", "grounding_sites.csv", "rejected.csv"):
        _same_table(read_csv(cli / name), read_csv(qg / name))
    for layer in ("exposures", "segments", "hazards", "assets", "sites"):
        a = pyogrio.read_dataframe(cli / "screening.gpkg", layer=layer)
        b = pyogrio.read_dataframe(qg / "screening.gpkg", layer=layer)
        _same_table(a, b)
        assert (a.geometry.to_wkb() == b.geometry.to_wkb()).all(), layer
    # the memory layer was read from a temporary GeoPackage named after the QGIS layer
    assert any("fences in memory (memory) saved to a temporary GeoPackage" in m
               for m in screen["messages"]["info"])
    # outputs load into the project; the report is an HTML output
    loaded = " ".join(screen["to_load"])
    for layer in ("hazards", "assets", "sites"):
        assert f"layername={layer}" in loaded
    assert screen["result"]["report"].endswith("report.html")
    assert screen["progress"] and max(screen["progress"]) >= 80.0


def test_cancel_leaves_previous_outputs_untouched(qgis_run):
    run = qgis_run["cancel"]
    assert run["canceled"] and run["result"] == {}
    assert run["before"] and run["before"] == run["after"]
    assert any("cancel" in m for m in run["messages"]["info"])


def test_input_problems_are_processing_errors(qgis_run):
    bad = qgis_run["bad"]
    assert not bad["ok"]
    text = " ".join(bad["messages"]["error"]) + " " + str(bad["exception"])
    # the message names the layer (as QGIS names it) and the field
    assert "lines without KV" in text and "'KV'" in text
    assert not (qgis_run["tmp"] / "bad_out" / "run.json").exists()


def test_config_problems_are_processing_errors(qgis_run):
    bad = qgis_run["bad_config"]
    assert not bad["ok"]
    # a ConfigError names the file and the key, as on the command line
    assert any("bad_config.toml: run.tower_spam_m: unknown setting" in m
               for m in bad["messages"]["error"])


def test_step_algorithm_passes_parameters_like_run_step(qgis_run):
    step = qgis_run["step"]
    assert step["ok"], step
    ref = pyogrio.read_dataframe(qgis_run["step_ref"] / "expose.gpkg", layer="exposures")
    got = pyogrio.read_dataframe(qgis_run["tmp"] / "step_out" / "expose.gpkg",
                                 layer="exposures")
    _same_table(ref, got)
    assert step["result"]["exposures"].endswith("expose.gpkg|layername=exposures")


def test_screenshot_of_the_styled_result(qgis_run):
    shot = qgis_run["render"]
    png = Path(shot["png"])
    assert png.stat().st_size > 20_000
    # the styles embedded in screening.gpkg were applied (not QGIS's single default symbol)
    assert shot["renderers"]["hazards"] != "singleSymbol"
    assert shot["renderers"]["power lines"] == "graduatedSymbol"  # by voltage
    assert shot["renderers"]["sites"] == "RuleRenderer"  # by remedy, unresolved ringed
    if os.environ.get("CORRIDOR_UPDATE_DOCS") == "1":
        shutil.copyfile(png, SCREENSHOT)


def test_plugin_zip_contents(tmp_path):
    path = build_zip(tmp_path / "p.zip")
    names = set(zipfile.ZipFile(path).namelist())
    for name in ("__init__.py", "provider.py", "algorithm.py", "metadata.txt", "icon.svg",
                 "algorithms.json", "engine.json"):
        assert f"{PLUGIN_ID}/{name}" in names
    meta = zipfile.ZipFile(path).read(f"{PLUGIN_ID}/metadata.txt").decode()
    assert "hasProcessingProvider=yes" in meta and "icon=icon.svg" in meta
    assert cli_main(["qgis-plugin", "--zip", str(tmp_path / "cli.zip")]) == 0
    assert (tmp_path / "cli.zip").exists()
