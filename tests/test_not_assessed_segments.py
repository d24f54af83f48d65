"""Segments that no criterion of the limit set judges are "not assessed", never clear.

Common practice for a screen (and this project's rule): what was not checked is not
passed. A limit set without a criterion for telecom cables, applied to the demo
corridor: its telecom cable must not come out clear with a utilization of 0.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import numpy as np
import pyogrio

from corridor.cli import main
from corridor.limits.evaluate import evaluate, unjudged_segments
from corridor.limits.limit_sets import load_limit_set

ROOT = Path(__file__).resolve().parents[1]
IEEE = ROOT / "corridor" / "data" / "limits" / "ieee_na.toml"


def _without_telecom(tmp_path: Path) -> Path:
    text = IEEE.read_text(encoding="utf-8")
    assert 'applies_to = ["telecom"]' in text  # the shipped set judges telecom cables
    out = tmp_path / "no_telecom.toml"
    out.write_text(text.replace('applies_to = ["telecom"]', 'applies_to = ["pipeline"]'),
                   encoding="utf-8")
    return out


def test_evaluate_marks_unjudged_segments_not_assessed(tmp_path):
    ls = load_limit_set(_without_telecom(tmp_path))
    kinds = np.array(["fence", "telecom"])
    res = evaluate(ls, kinds, {"v_normal_v": np.array([10.0, 10.0]),
                               "v_fault_v": np.array([100.0, 100.0])},
                   clearing_time_s=0.5, soil_resistivity_ohm_m=100.0, high_reliability=False)
    assert np.isfinite(res["utilization"][0]) and res["hazard_class"][0] != "not assessed"
    assert np.isnan(res["utilization"][1])
    assert res["hazard_class"][1] == "not assessed" and res["governing"][1] == ""
    row = unjudged_segments(ls, kinds, np.array(["F1", "T1"]), res["utilization"])
    assert row["segments"] == 1 and row["assets"] == ["T1"]
    assert row["kinds_without_criteria"] == ["telecom"]


def test_run_reports_the_unjudged_cable_loudly(tmp_path, caplog):
    limits = _without_telecom(tmp_path)
    text = (ROOT / "config" / "demo.toml").read_text(encoding="utf-8")
    text = text.replace('"../', f'"{ROOT}/').replace('limit_set = "ieee_na"',
                                                      f'limit_set = "{limits}"')
    cfg = tmp_path / "run.toml"
    cfg.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    with caplog.at_level(logging.WARNING, logger="corridor"):
        main(["run", str(cfg), "--out", str(out), "-q"])
    seg = pyogrio.read_dataframe(out / "screening.gpkg", layer="segments")
    tel = seg[seg["asset_kind"] == "telecom"]
    assert len(tel) > 0
    assert (tel["hazard_class"] == "not assessed").all()
    assert tel["utilization"].isna().all()
    assert not (seg.loc[seg["asset_kind"] != "telecom", "hazard_class"] == "not assessed").any()
    assets = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets")
    cable = assets[assets["asset_kind"] == "telecom"]
    assert (cable["hazard_class"] == "not assessed").all()
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert record["counts"]["segments_not_assessed"] == len(tel)
    assert record["segments_not_assessed"]["kinds_without_criteria"] == ["telecom"]
    assert any("NOT ASSESSED" in r.getMessage() and "telecom" in r.getMessage()
               for r in caplog.records)
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="segments-not-assessed"' in html
    _qgis_draws_every_segment(out / "screening.gpkg", set(tel["segment_id"]))


QGIS_CHECK = """
import sys
from qgis.core import QgsApplication, QgsVectorLayer, QgsRenderContext
app = QgsApplication([], False); app.initQgis()
lyr = QgsVectorLayer(sys.argv[1] + "|layername=segments", "segments", "ogr")
renderer = lyr.renderer().clone()  # the default style stored in the GeoPackage
ctx = QgsRenderContext()
renderer.startRender(ctx, lyr.fields())
drawn = {int(f["segment_id"]) for f in lyr.getFeatures() if renderer.willRenderFeature(f, ctx)}
renderer.stopRender(ctx)
print(renderer.type(), lyr.featureCount(), " ".join(map(str, sorted(drawn))))
"""


def _qgis_draws_every_segment(gpkg: Path, unjudged: set) -> None:
    # QGIS itself (Debian python3-qgis), with the default style corridor stored in the
    # GeoPackage: every segment is drawn, those without a utilization included.
    import subprocess

    import pytest

    from tests.test_qgis import QGIS_PYTHON, _qgis_env, _qgis_missing

    missing = _qgis_missing()
    if missing:
        pytest.skip(missing)
    proc = subprocess.run([QGIS_PYTHON, "-c", QGIS_CHECK, str(gpkg)], capture_output=True,
                          text=True, env=_qgis_env(), timeout=300, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    kind, count, *drawn = proc.stdout.split("\n")[-2].split(" ")
    assert kind == "RuleRenderer"
    assert len(drawn) == int(count)  # every feature drawn
    assert unjudged <= {int(d) for d in drawn}


def test_exceedance_that_is_no_longer_judged_is_not_resolved(tmp_path):
    # The same output folder, first with the shipped limit set (the telecom cable is
    # judged), then with one that has no telecom criterion: changes.csv must not call the
    # cable's result resolved or lower; it is no longer assessed (common practice: what
    # was not checked is not passed).
    limits = _without_telecom(tmp_path)
    base = (ROOT / "config" / "demo.toml").read_text(encoding="utf-8").replace(
        '"../', f'"{ROOT}/')
    out = tmp_path / "out"
    first, second = tmp_path / "a.toml", tmp_path / "b.toml"
    first.write_text(base, encoding="utf-8")
    second.write_text(base.replace('limit_set = "ieee_na"', f'limit_set = "{limits}"'),
                      encoding="utf-8")
    main(["run", str(first), "--out", str(out), "-q"])
    main(["run", str(second), "--out", str(out), "-q"])
    import pandas as pd

    changes = pd.read_csv(out / "changes.csv")
    cable = changes[changes["asset_kind"] == "telecom"]
    assert list(cable["change"]) == ["no longer assessed"]
    assert "resolved exceedance" not in set(cable["change"])
    # run again unchanged: still not assessed, no new change row for it
    main(["run", str(second), "--out", str(out), "-q"])
    again = pd.read_csv(out / "changes.csv")
    assert "no longer assessed" not in set(again.get("change", pd.Series(dtype=str)))
