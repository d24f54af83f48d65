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


# -- every file of a dataset counts: an edit the main file does not show -------------
#
# References: ESRI Shapefile Technical Description (1998): the attributes are in the
# dBASE .dbf file beside the .shp; SQLite WAL (https://www.sqlite.org/wal.html):
# while a connection stays open, committed changes live in the -wal file only.
# The reference result is a fresh run without a cache of the same (edited) inputs.

def _scenario(root: Path, driver: str = "GPKG") -> Path:
    from tests.conftest import Scenario
    from tests.test_overnight import fences

    root.mkdir(parents=True)
    sc = Scenario(root)
    cfg = sc.build(driver, assets=fences())
    return sc.write_config(cfg)


def _reference(cfg: Path, out: Path) -> Path:
    """A fresh run without a cache of the same config and layers into ``out``."""
    ref = cfg.with_name("reference.toml")
    ref.write_text(cfg.read_text(encoding="utf-8").replace(
        "[run]\n", '[run]\ncache_dir = ""\n', 1), encoding="utf-8")
    assert _run(ref, out) == 0
    return out


def _f2_utilization(out: Path) -> float:
    assets = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets")
    return float(assets.loc[assets["asset_id"] == "F2", "worst_utilization"].iloc[0])


def _assert_recomputed_as_fresh(cfg: Path, out: Path, tmp_path: Path, before: float) -> None:
    assert _run(cfg, out) == 0
    record = json.loads((out / "run.json").read_text())
    assert record["counts"].get("outputs_reused", 0) == 0
    assert record["counts"]["assets_recomputed"] >= 1
    ref = _reference(cfg, tmp_path / "ref")
    assert _f2_utilization(out) == _f2_utilization(ref) != before
    for layer in ("assets", "sites", "segments"):
        a = pyogrio.read_dataframe(out / "screening.gpkg", layer=layer)
        b = pyogrio.read_dataframe(ref / "screening.gpkg", layer=layer)
        pd.testing.assert_frame_equal(a.drop(columns="geometry"), b.drop(columns="geometry"),
                                      check_exact=False, rtol=1e-12)


def test_edit_of_the_dbf_alone_is_seen(tmp_path):
    import hashlib

    cfg = _scenario(tmp_path / "s", "ESRI Shapefile")
    out = tmp_path / "s" / "out"
    assert _run(cfg, out) == 0
    before = _f2_utilization(out)
    # the same layer with F2's posts at 5 ohm, written elsewhere: only its .dbf is copied
    from tests.test_overnight import fences

    edited = tmp_path / "edited"
    edited.mkdir()
    pyogrio.write_dataframe(fences(post_ohm={"F2": 5.0}), edited / "assets.shp",
                            driver="ESRI Shapefile")
    shp = tmp_path / "s" / "assets.shp"
    main_before = hashlib.sha256(shp.read_bytes()).hexdigest()
    shutil.copyfile(edited / "assets.dbf", tmp_path / "s" / "assets.dbf")
    assert hashlib.sha256(shp.read_bytes()).hexdigest() == main_before
    _assert_recomputed_as_fresh(cfg, out, tmp_path, before)


def test_edit_held_in_a_geopackage_wal_is_seen(tmp_path):
    import hashlib
    import sqlite3

    cfg = _scenario(tmp_path / "s")
    gpkg = tmp_path / "s" / "assets.gpkg"
    con = sqlite3.connect(gpkg)
    con.execute("PRAGMA journal_mode=WAL")  # changes the main file's header: done first
    con.close()
    out = tmp_path / "s" / "out"
    assert _run(cfg, out) == 0
    before = _f2_utilization(out)
    main_before = hashlib.sha256(gpkg.read_bytes()).hexdigest()
    con = sqlite3.connect(gpkg)

    def geometry_function(blob):  # named by the GeoPackage R-tree triggers (GPKG 1.4,
        # extension gpkg_rtree_index); they fire only when the geometry or the feature id
        # changes, never on this attribute update, but SQLite resolves the names first
        raise AssertionError("an attribute update must not reach the R-tree triggers")

    for name in ("ST_IsEmpty", "ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY"):
        con.create_function(name, 1, geometry_function)
    try:
        con.execute("UPDATE assets SET POST_OHM = 5.0 WHERE AID = 'F2'")
        con.commit()  # the connection stays open: the change stays in assets.gpkg-wal
        assert gpkg.with_name("assets.gpkg-wal").stat().st_size > 0
        assert hashlib.sha256(gpkg.read_bytes()).hexdigest() == main_before
        _assert_recomputed_as_fresh(cfg, out, tmp_path, before)
    finally:
        con.close()


def test_edit_of_one_file_of_a_folder_dataset_is_seen(tmp_path):
    """An Esri File Geodatabase (a folder); the edited table's files are copied in."""
    from tests.test_overnight import fences

    cfg = _scenario(tmp_path / "s")
    gdb = tmp_path / "s" / "assets.gdb"
    pyogrio.write_dataframe(fences(), gdb, layer="assets", driver="OpenFileGDB")
    cfg.write_text(cfg.read_text(encoding="utf-8").replace('"assets.gpkg"', '"assets.gdb"'),
                   encoding="utf-8")
    out = tmp_path / "s" / "out"
    assert _run(cfg, out) == 0
    before = _f2_utilization(out)
    edited = tmp_path / "edited.gdb"
    pyogrio.write_dataframe(fences(post_ohm={"F2": 5.0}), edited, layer="assets",
                            driver="OpenFileGDB")
    changed = [p.name for p in sorted(edited.iterdir())
               if not (gdb / p.name).exists() or (gdb / p.name).read_bytes() != p.read_bytes()]
    assert changed
    for name in changed:
        shutil.copyfile(edited / name, gdb / name)
    _assert_recomputed_as_fresh(cfg, out, tmp_path, before)
