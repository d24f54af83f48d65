"""The cache of per-asset results: ownership of its folder, damaged or failing caches,
and merged runs (incremental, partitioned) that equal a full run, types included.

The scenario is the small invented corridor of ``tests/test_overnight.py`` (one
4 km line, four fences; F1 to F3 get grounding sites, F4 none). The reference
for every check is a fresh full run of the same inputs without a cache: the
cache's contract (common practice for a cache) is that it never changes a
result. Numbers agree to rtol 1e-12 (same code on a subset; only summation
order could differ) and column types exactly. File-system facts (a file's
SHA-256 before and after) show that user files were not touched.
"""

from __future__ import annotations

import errno
import json
import shutil
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pyogrio
import pytest

from corridor.io.outputs import sha256_file
from tests.test_overnight import OFFSETS_M, cli_run, layers_equal, make

PROFILE_LABEL = "with proposed grounds"


def run(cli, capsys, cfg: Path, out: Path | None = None) -> tuple[int, str, dict]:
    """Run in-process; exit code, console text and run.json of the output folder."""
    capsys.readouterr()
    args = ["run", str(cfg)] + (["--out", str(out)] if out else [])
    rc = cli(args)
    err = capsys.readouterr().err
    folder = out or cfg.parent / "out"
    record = {}
    if (folder / "run.json").exists():
        record = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    return rc, err, record


def same_outputs(a: Path, b: Path) -> None:
    """Every layer equal in values and in the GeoPackage's column types, every CSV equal,
    and the report draws as many 'with proposed grounds' curves."""
    layers_equal(a, b)  # values and pandas dtypes as read back (assert_frame_equal)
    for name in pyogrio.list_layers(a / "screening.gpkg")[:, 0]:
        if name == "layer_styles":
            continue
        ia = pyogrio.read_info(a / "screening.gpkg", layer=name)
        ib = pyogrio.read_info(b / "screening.gpkg", layer=name)
        assert list(ia["fields"]) == list(ib["fields"]), name
        assert list(ia["dtypes"]) == list(ib["dtypes"]), name
    ra = (a / "report.html").read_text(encoding="utf-8")
    rb = (b / "report.html").read_text(encoding="utf-8")
    assert ra.count(PROFILE_LABEL) == rb.count(PROFILE_LABEL)


def full_run(cli, capsys, root: Path, **kw) -> Path:
    cfg = make(root, cache="", **kw)
    rc, err, _ = run(cli, capsys, cfg)
    assert rc == 0, err
    return root / "out"


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> Path:
    """Outputs of a full run of the unedited scenario without a cache."""
    root = tmp_path_factory.mktemp("reference")
    rc, _, err = cli_run(make(root, cache=""))
    assert rc == 0, err
    return root / "out"


@pytest.fixture(scope="module")
def cached_scenario(tmp_path_factory) -> Path:
    """The unedited scenario after one run with its cache in ``shared`` (copied per test)."""
    root = tmp_path_factory.mktemp("cached") / "d"
    cfg = make(root, cache="shared")
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    return root


def tree(folder: Path) -> dict[str, str]:
    """Relative path -> SHA-256 (files) or 'dir', for every entry under ``folder``."""
    return {p.relative_to(folder).as_posix(): ("dir" if p.is_dir() else sha256_file(p))
            for p in sorted(folder.rglob("*"))}


# -- merged runs equal a full run, types included ------------------------------

@pytest.mark.parametrize(("edited", "post_ohm"), [("F4", 5.0), ("F3", 150.0)],
                         ids=["no-site-recomputed", "sites-recomputed"])
def test_incremental_rerun_equals_full_run_types_included(tmp_path, cli, capsys, edited,
                                                          post_ohm):
    """F4 has no grounding site: recomputing it alone gave an empty untyped sites table,
    and the merged layer's numbers came out as text."""
    cfg = make(tmp_path / "inc")
    assert run(cli, capsys, cfg)[0] == 0
    make(tmp_path / "inc", post_ohm={edited: post_ohm})
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0, err
    assert record["counts"]["assets_recomputed"] == 1
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M) - 1
    full = full_run(cli, capsys, tmp_path / "full", post_ohm={edited: post_ohm})
    assert PROFILE_LABEL in (full / "report.html").read_text(encoding="utf-8")
    same_outputs(tmp_path / "inc" / "out", full)
    sites = pyogrio.read_info(full / "screening.gpkg", layer="sites")
    types = dict(zip(sites["fields"], sites["dtypes"], strict=True))
    assert types["ground_resistance_ohm"] == "float64"  # a number, not text


def test_all_from_cache_equals_full_run(tmp_path, cli, capsys, cached_scenario, reference):
    """Every asset from the cache (another output folder, same cache): the report keeps
    its 'with proposed grounds' curves."""
    root = shutil.copytree(cached_scenario, tmp_path / "c")
    rc, err, record = run(cli, capsys, root / "run.toml", root / "out2")
    assert rc == 0, err
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M)
    assert PROFILE_LABEL in (reference / "report.html").read_text(encoding="utf-8")
    same_outputs(root / "out2", reference)


@pytest.mark.parametrize("settings", [{"partitions": 4, "threads": 1},
                                      {"partitions": 2, "threads": 2}],
                         ids=["4-partitions", "2-threads"])
def test_partitioned_run_equals_full_run_types_included(tmp_path, cli, capsys, settings,
                                                        reference):
    cfg = make(tmp_path / "p", cache="", run=settings)
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0, err
    assert record["counts"]["partitions"] == settings["partitions"]
    same_outputs(tmp_path / "p" / "out", reference)


# -- damaged caches ----------------------------------------------------------------

def _gen(cache: Path) -> Path:
    manifest = json.loads((cache / "corridor-cache.json").read_text(encoding="utf-8"))
    return cache / manifest["generation"]


def _rewrite(path: Path, fn) -> None:
    table = pq.read_table(path)
    pq.write_table(fn(table), path)


def _truncate(cache):  # a valid Parquet file with half the rows
    _rewrite(_gen(cache) / "segments.parquet", lambda t: t.slice(0, t.num_rows // 2))


def _flip(cache):  # one value of F1 changed
    def fn(t):
        df = t.to_pandas()
        i = df.index[df["asset_id"] == "F1"][0]
        df.loc[i, "v_normal_v"] = df.loc[i, "v_normal_v"] * 2.0 + 1.0
        return type(t).from_pandas(df, schema=t.schema, preserve_index=False)
    _rewrite(_gen(cache) / "segments.parquet", fn)


def _drop_site(cache):  # F3's second site gone
    def fn(t):
        df = t.to_pandas()
        i = df.index[df["asset_id"] == "F3"][-1]
        return type(t).from_pandas(df.drop(index=i), schema=t.schema, preserve_index=False)
    _rewrite(_gen(cache) / "sites.parquet", fn)


def _edit_index(fn):
    def corrupt(cache):
        path = _gen(cache) / "index.json"
        idx = json.loads(path.read_text(encoding="utf-8"))
        fn(idx)
        path.write_text(json.dumps(idx), encoding="utf-8")
    return corrupt


def _key_as_int(idx):
    idx["assets"]["F2"]["key"] = 12345


def _assets_as_list(idx):
    idx["assets"] = list(idx["assets"])


def _count_as_text(idx):
    idx["assets"]["F1"]["tables"]["segments"][0] = "many"


def _tables_meta_wrong(idx):
    idx["tables"]["segments"]["dtypes"] = ["float64"]


def _garbage_parquet(cache):
    (_gen(cache) / "exposures.parquet").write_bytes(b"PAR1 not a parquet file")


def _missing_file(cache):
    (_gen(cache) / "_counts.parquet").unlink()


def _manifest_garbage(cache):
    (cache / "corridor-cache.json").write_text("{not json", encoding="utf-8")


def _manifest_types(cache):
    (cache / "corridor-cache.json").write_text(
        json.dumps({"corridor_cache": 2, "generation": 7, "owned": {"../x": ["a"], "g": 3}}),
        encoding="utf-8")


CORRUPTIONS = {
    "truncated-rows": (_truncate, None),
    "flipped-value": (_flip, 1),
    "dropped-site": (_drop_site, 1),
    "index-key-int": (_edit_index(_key_as_int), None),
    "index-assets-list": (_edit_index(_assets_as_list), None),
    "index-count-text": (_edit_index(_count_as_text), None),
    "index-meta-types": (_edit_index(_tables_meta_wrong), None),
    "garbage-parquet": (_garbage_parquet, None),
    "missing-table-file": (_missing_file, None),
    "manifest-garbage": (_manifest_garbage, None),
    "manifest-types": (_manifest_types, None),
}


@pytest.mark.parametrize("kind", list(CORRUPTIONS))
def test_damaged_cache_is_recomputed_and_equals_full_run(tmp_path, cli, capsys, kind,
                                                          cached_scenario, reference):
    corrupt, recomputed = CORRUPTIONS[kind]
    root = shutil.copytree(cached_scenario, tmp_path / "d")
    cfg = root / "run.toml"
    corrupt(root / "shared")
    out2 = root / "out2"
    rc, err, record = run(cli, capsys, cfg, out2)
    assert rc == 0, err
    assert "Traceback" not in err and "internal error" not in err
    assert "WARNING" in err and "shared" in err
    counts = record["counts"]
    if recomputed is not None:  # only the damaged asset is recomputed
        assert counts["assets_recomputed"] == recomputed
        assert counts["cache_entries_failed"] == recomputed
    else:
        assert counts["assets_recomputed"] >= 1
    same_outputs(out2, reference)
    # the cache was rewritten: a third run takes everything from it, unwarned
    rc, err, record = run(cli, capsys, cfg, root / "out3")
    assert rc == 0 and "WARNING" not in err, err
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M)


# -- ownership of the cache folder ------------------------------------------------

def _user_folder(root: Path) -> None:
    (root / "notes.txt").write_text("survey notes\n", encoding="utf-8")
    (root / "archive").mkdir()
    (root / "archive" / "old.gpkg").write_bytes(b"user data")
    (root / "g17-1").mkdir()  # named like a cache generation
    (root / "g17-1" / "x.parquet").write_bytes(b"user data")


def test_cache_dir_dot_leaves_the_config_folder_untouched(tmp_path, cli, capsys):
    root = tmp_path / "project"
    cfg = make(root, out="../out", cache=".")
    _user_folder(root)
    before = tree(root)
    rc, err, record = run(cli, capsys, cfg, tmp_path / "out")
    assert rc == 0, err
    assert "WARNING" in err and str(root) in err and "notes.txt" in err
    assert record["counts"]["assets_recomputed"] == len(OFFSETS_M)
    assert tree(root) == before
    make(root, out="../out", cache=".", post_ohm={"F2": 5.0})  # an edit: a computing run
    before = tree(root)
    rc, err, _ = run(cli, capsys, cfg, tmp_path / "out")
    assert rc == 0, err
    assert tree(root) == before
    assert not (tmp_path / "project.lock").exists()


def test_foreign_cache_folder_is_not_used(tmp_path, cli, capsys):
    cfg = make(tmp_path / "s", cache="mine")
    (tmp_path / "s" / "mine").mkdir()
    _user_folder(tmp_path / "s" / "mine")
    before = tree(tmp_path / "s" / "mine")
    for post_ohm in (80.0, 70.0):  # the second run has an edit: it computes
        make(tmp_path / "s", cache="mine", post_ohm={"F1": post_ohm})
        rc, err, record = run(cli, capsys, cfg)
        assert rc == 0, err
        assert record["counts"]["assets_from_cache"] == 0
    assert "archive" in err and "mine" in err
    assert tree(tmp_path / "s" / "mine") == before


def test_cache_deletes_only_its_own_files(tmp_path, cli, capsys):
    """User files dropped into corridor's cache folder, even into a generation folder,
    survive the next generation; the cache stays in use."""
    cfg = make(tmp_path / "o", cache="c")
    assert run(cli, capsys, cfg)[0] == 0
    cache = tmp_path / "o" / "c"
    gen = _gen(cache)
    (cache / "readme.txt").write_text("mine\n", encoding="utf-8")
    (gen / "mine.csv").write_text("a,b\n", encoding="utf-8")
    make(tmp_path / "o", cache="c", post_ohm={"F1": 5.0})
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0, err
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M) - 1
    assert (cache / "readme.txt").read_text(encoding="utf-8") == "mine\n"
    assert (gen / "mine.csv").read_text(encoding="utf-8") == "a,b\n"
    assert _gen(cache) != gen
    assert sorted(p.name for p in gen.iterdir()) == ["mine.csv"]  # its own files went


def test_empty_folder_is_taken_and_desktop_files_kept(tmp_path, cli, capsys):
    cfg = make(tmp_path / "e", cache="c")
    cache = tmp_path / "e" / "c"
    cache.mkdir()
    (cache / ".DS_Store").write_bytes(b"view settings")
    assert run(cli, capsys, cfg)[0] == 0
    make(tmp_path / "e", cache="c", post_ohm={"F4": 5.0})
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0 and "WARNING" not in err, err
    assert record["counts"]["assets_from_cache"] == len(OFFSETS_M) - 1
    assert (cache / ".DS_Store").read_bytes() == b"view settings"


def test_previous_cache_format_is_taken_over(tmp_path, cli, capsys):
    """A cache of format 1 (index.json and generation folders, no manifest) is corridor's:
    it is taken over, recomputed and replaced."""
    cfg = make(tmp_path / "l", cache="c")
    cache = tmp_path / "l" / "c"
    (cache / "g18c1-42").mkdir(parents=True)
    (cache / "g18c1-42" / "segments.parquet").write_bytes(b"old")
    (cache / "index.json").write_text(json.dumps({"format": 1, "generation": "g18c1-42",
                                                  "assets": {}}), encoding="utf-8")
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0, err
    assert record["counts"]["assets_recomputed"] == len(OFFSETS_M)
    names = sorted(p.name for p in cache.iterdir())
    assert names == ["corridor-cache.json", _gen(cache).name]


# -- failing caches only warn --------------------------------------------------------

def test_unwritable_cache_warns_and_the_run_completes(tmp_path, cli, capsys, monkeypatch,
                                                      reference):
    import corridor.cache_store as cache_mod  # the store reads and writes the tables

    real = cache_mod.write_table

    def disk_full(frame, path):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(cache_mod, "write_table", disk_full)
    cfg = make(tmp_path / "w", cache="c")
    rc, err, _ = run(cli, capsys, cfg)
    assert rc == 0, err
    assert "not written" in err and "No space left" in err
    same_outputs(tmp_path / "w" / "out", reference)
    # space again: the half-written generation is cleaned, one generation remains
    monkeypatch.setattr(cache_mod, "write_table", real)
    rc, err, _ = run(cli, capsys, cfg, tmp_path / "w" / "out2")
    assert rc == 0, err
    cache = tmp_path / "w" / "c"
    assert sorted(p.name for p in cache.iterdir()) == ["corridor-cache.json", _gen(cache).name]


def test_unreadable_cache_warns_and_recomputes(tmp_path, cli, capsys, monkeypatch,
                                               cached_scenario, reference):
    import corridor.cache_store as cache_mod  # the store reads and writes the tables

    root = shutil.copytree(cached_scenario, tmp_path / "r")

    def denied(path, meta):
        raise PermissionError(errno.EACCES, "Permission denied", str(path))

    monkeypatch.setattr(cache_mod, "read_table", denied)
    rc, err, record = run(cli, capsys, root / "run.toml", root / "out2")
    assert rc == 0, err
    assert "Permission denied" in err
    assert record["counts"]["assets_recomputed"] == len(OFFSETS_M)
    same_outputs(root / "out2", reference)


def test_cache_folder_that_cannot_be_made_only_warns(tmp_path, cli, capsys):
    """cache_dir under a regular file: neither its lock nor the folder can be made."""
    cfg = make(tmp_path / "x", cache="afile/cache")
    (tmp_path / "x" / "afile").write_text("a user file\n", encoding="utf-8")
    rc, err, record = run(cli, capsys, cfg)
    assert rc == 0, err
    assert "without the cache" in err
    assert (tmp_path / "x" / "afile").read_text(encoding="utf-8") == "a user file\n"
    assert record["counts"]["assets_recomputed"] == len(OFFSETS_M)


# -- asset keys with references to no asset ---------------------------------------------

def test_asset_keys_ignore_unknown_references_and_compare_ids_as_text():
    """Grounding items naming no screened asset, and towers naming no line, do not enter
    any key (nor raise); an integer id names the asset whose id is that text."""
    import dataclasses

    from corridor.config import load_config
    from corridor.io.layers import read_inputs
    from corridor.keys import asset_keys

    cfg = load_config(Path(__file__).resolve().parents[1] / "config" / "demo.toml")
    inputs = read_inputs(cfg)
    base = asset_keys(cfg, inputs).table.set_index("asset_id")["key"]
    g = inputs.grounds
    extra = g.iloc[[0, 0]].copy()
    extra["asset_id"] = ["NO-SUCH-ASSET", 404]
    extra["feature_id"] = ["X1", "X2"]
    with_unknown = dataclasses.replace(
        inputs, grounds=pd.concat([extra, g], ignore_index=True))
    keys = asset_keys(cfg, with_unknown).table.set_index("asset_id")["key"]
    pd.testing.assert_series_equal(keys, base)
    # towers of an unknown line beside a tower of a real line
    towers = g.iloc[:3][["geometry"]].copy()
    towers["line_id"] = [inputs.lines["line_id"].iloc[0], "NO-SUCH-LINE", 7]
    known = asset_keys(cfg, dataclasses.replace(inputs, towers=towers.iloc[:1]))
    mixed = asset_keys(cfg, dataclasses.replace(inputs, towers=towers))
    pd.testing.assert_frame_equal(mixed.table, known.table)
    # integer ids: asset "7" and a grounding item naming 7 (int) or "7" (text)
    assets = inputs.assets.copy()
    first = assets["asset_id"].iloc[0]
    assets["asset_id"] = assets["asset_id"].replace({first: "7"})
    as_text = g.copy()
    as_text["asset_id"] = as_text["asset_id"].replace({first: "7"})
    as_int = g.copy().astype({"asset_id": object})
    as_int.loc[as_int["asset_id"] == first, "asset_id"] = 7
    k_text = asset_keys(cfg, dataclasses.replace(inputs, assets=assets, grounds=as_text))
    k_int = asset_keys(cfg, dataclasses.replace(inputs, assets=assets, grounds=as_int))
    assert k_text.table.loc[0, "grounds"] == k_int.table.loc[0, "grounds"]
    assert k_text.table.loc[0, "grounds"] != asset_keys(
        cfg, dataclasses.replace(inputs, assets=assets)).table.loc[0, "grounds"]


# -- the dask backend's merged run -----------------------------------------------------

def test_dask_run_carries_every_per_asset_table(tmp_path):
    """The demo on a dask cluster in 3 partitions: every per-asset table the cache keeps,
    the grounding stage's after-table (the report's profiles) included, equals the
    in-process full run's (same columns, dtypes, rows and order)."""
    distributed = pytest.importorskip("distributed")
    from corridor.backends import override_run
    from corridor.backends.dask_backend import compute_dask
    from corridor.compute import compute
    from corridor.config import load_config
    from corridor.io.layers import read_inputs
    from corridor.partitions import PER_ASSET_TABLES, per_asset_tables
    from corridor.steps import asset_stages
    from tests.test_dask_backend import assert_same_rows

    cfg = load_config(Path(__file__).resolve().parents[1] / "config" / "demo.toml")
    local = compute(cfg, read_inputs(cfg), asset_stages())
    full = per_asset_tables(local)
    assert set(PER_ASSET_TABLES) <= set(full)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  dashboard_address=":0", host="127.0.0.1") as cluster:
        dcfg = override_run(cfg, backend="dask", scheduler_address=cluster.scheduler_address,
                            partitions=3)
        merged = compute_dask(dcfg, read_inputs(dcfg), asset_stages(), work_dir=tmp_path)
    assert merged.counts["partitions"] == 3
    tables = per_asset_tables(merged)
    assert set(tables) == set(full)
    for name, table in full.items():
        assert_same_rows(tables[name], table, name)
    assert_same_rows(merged.segment_table_after_grounding, local.segment_table_after_grounding,
                     "segment_table_after_grounding")


def test_asset_checksums_survive_parquet_and_see_every_change(tmp_path):
    """Parquet keeps float64 bits, integers, booleans, text, nulls and WKB geometry as
    written (Apache Parquet format specification): checksums of a table read back equal
    those of the table written; a changed value, dtype, row or row order changes them."""
    import geopandas as gpd
    import numpy as np
    from shapely.geometry import LineString, Point

    from corridor.cache import asset_checksums, read_table, write_table

    frame = gpd.GeoDataFrame({
        "asset_id": ["A", "A", "B", "C"],
        "v": [1.5, np.nan, -0.0, 1e300],
        "n": np.array([1, 2, 3, 4], dtype=np.int64),
        "ok": [True, False, True, False],
        "label": ["x", None, "z", ""],
    }, geometry=[Point(0, 0), LineString([(0, 0), (1, 1)]), None, Point(1, 2)],
        crs="EPSG:32633")
    meta = write_table(frame, tmp_path / "t.parquet")
    back = read_table(tmp_path / "t.parquet", meta)
    base = asset_checksums(frame)
    assert asset_checksums(back) == base
    assert {a: n for a, (n, _) in base.items()} == {"A": 2, "B": 1, "C": 1}

    def changed(f) -> set[str]:
        now = asset_checksums(f)
        return {a for a in base if now.get(a) != base[a]}

    flipped = frame.copy()
    flipped.loc[0, "v"] = 1.5000000000000002  # the next float64 after 1.5
    assert changed(flipped) == {"A"}
    assert changed(frame.iloc[[1, 0, 2, 3]].reset_index(drop=True)) == {"A"}
    assert changed(frame.drop(index=3).reset_index(drop=True)) == {"C"}
    assert changed(frame.astype({"n": "float64"})) == {"A", "B", "C"}
    moved = frame.copy()
    moved.loc[3, "geometry"] = Point(1, 2.000001)
    assert changed(moved) == {"C"}
