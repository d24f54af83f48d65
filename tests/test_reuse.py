"""A rerun with no input changed republishes the previous results unchanged.

The property checked is the project's own contract (outputs identical to a
full run's); the reference is a fresh full run into another folder.
"""

import json
import logging
import shutil
from pathlib import Path

import pandas as pd
import pyogrio

from corridor.cli import main

ROOT = Path(__file__).resolve().parents[1]


def _run(cfg, out):
    rc = main(["run", str(cfg), "--out", str(out), "-q"])
    for h in list(logging.getLogger("corridor").handlers):
        logging.getLogger("corridor").removeHandler(h)
    return rc


def test_unchanged_rerun_reuses_and_matches_a_full_run(tmp_path):
    work = tmp_path / "w"
    shutil.copytree(ROOT / "config", work / "config")
    shutil.copytree(ROOT / "sample_layers", work / "sample_layers")
    cfg = work / "config" / "demo.toml"
    out = tmp_path / "out"
    assert _run(cfg, out) == 0
    first = json.loads((out / "run.json").read_text())
    assert first["counts"].get("outputs_reused", 0) == 0
    assert _run(cfg, out) == 0
    again = json.loads((out / "run.json").read_text())
    assert again["counts"]["outputs_reused"] == 1
    assert again["counts"]["assets_recomputed"] == 0
    assert again["changes"]["unchanged_inputs"] is True
    assert pd.read_csv(out / "changes.csv", comment="#").empty
    assert "No input changed since" in (out / "report.html").read_text()
    # identical to a fresh full run of the same inputs
    fresh = tmp_path / "fresh"
    assert _run(cfg, fresh) == 0
    for layer in ("segments", "exposures", "sites", "assets", "hazards"):
        a = pyogrio.read_dataframe(out / "screening.gpkg", layer=layer)
        b = pyogrio.read_dataframe(fresh / "screening.gpkg", layer=layer)
        pd.testing.assert_frame_equal(a.drop(columns="geometry"), b.drop(columns="geometry"))
        assert a.geometry.geom_equals_exact(b.geometry, 0.0).all()
    for name in ("grounding_sites.csv", "exposures.csv", "rejected.csv"):
        assert (out / name).read_bytes() == (fresh / name).read_bytes()
    # an edited input is noticed: the next run computes again
    cfg.write_text(cfg.read_text().replace("footing_radius_m = 1.5",
                                           "footing_radius_m = 1.2"))
    assert _run(cfg, out) == 0
    third = json.loads((out / "run.json").read_text())
    assert third["counts"].get("outputs_reused", 0) == 0
