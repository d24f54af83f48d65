"""Property tests: malformed configs and layers give a clear error or a complete account.

Two fuzzers of issue 12. The config fuzzer mutates the demo config (a value replaced by a
random TOML value of another type, a key deleted, an unknown key, arrays nested deeply)
and asserts that ``load_config`` and ``read_inputs`` end either normally or with
:class:`ConfigError` / :class:`InputError`: no other exception. The layer fuzzer draws
attribute values (NULL, text in number fields, huge, negative, NaN and infinite
numbers, integer ids, empty geometry, far coordinates) and asserts that every feature
read is either in the read layers or in the rejected rows of its role, once.

A guard (SIGALRM) turns a hang into a failure; it asserts nothing about speed.
"""

from __future__ import annotations

import json
import math
import signal
import tomllib
import warnings
from contextlib import contextmanager
from pathlib import Path

import geopandas as gpd
import numpy as np
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from shapely.geometry import LineString, Point

from corridor.config import PACKAGED_ARRANGEMENTS, load_config
from corridor.errors import ConfigError, InputError
from corridor.io.layers import read_inputs
from tests.conftest import PROJECTED_CRS, X0_M, Y0_M, Scenario

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
HANG_GUARD_S = 120  # far beyond any example; only a hang reaches it


@contextmanager
def _hang_guard():
    if not hasattr(signal, "SIGALRM"):
        yield
        return

    def fail(signum, frame):
        raise AssertionError(f"no answer within {HANG_GUARD_S} s: a hang")

    old = signal.signal(signal.SIGALRM, fail)
    signal.alarm(HANG_GUARD_S)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


# --- TOML writing: everything inline, so that any shape can be written ----------------------

class Deep:
    """A marker value written as an array nested ``depth`` deep."""

    def __init__(self, depth: int):
        self.depth = depth


def _key(k: str) -> str:
    return json.dumps(k, ensure_ascii=False)


def _value(v) -> str:
    if isinstance(v, Deep):
        return "[" * v.depth + "]" * v.depth
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # JSON escapes are TOML basic-string escapes
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def _toml(cfg: dict) -> str:
    return "".join(f"{_key(k)} = {_value(v)}\n" for k, v in cfg.items())


def _demo_dict() -> dict:
    with open(DEMO, "rb") as fh:
        cfg = tomllib.load(fh)
    base = DEMO.parent
    layers = cfg["layers"]
    for entry in [layers["power_lines"], *layers["assets"], layers["soil"], layers["grounds"]]:
        entry["path"] = str((base / entry["path"]).resolve())
    # the demo uses the arrangements shipped in the package (none beside demo.toml)
    cfg["run"]["arrangements"] = str(PACKAGED_ARRANGEMENTS)
    cfg["run"]["output_dir"] = "out"
    return cfg


def _paths(node, prefix=()):
    """Every (path, value) in a nested dict/list."""
    yield prefix, node
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


_text = st.text(st.characters(exclude_categories=("Cs",)), max_size=12)
_scalar = st.one_of(
    st.booleans(), st.integers(-10**12, 10**12), st.floats(allow_nan=True, allow_infinity=True),
    _text, st.sampled_from(["", "EPSG:2272", "EPSG:4326", "fence", "ground", "\x00",
                            "../../nowhere", "220 kV", "nan", "1e400"]))
_toml_value = st.recursive(
    _scalar, lambda inner: st.one_of(st.lists(inner, max_size=3),
                                     st.dictionaries(_text, inner, max_size=3)),
    max_leaves=6)


@st.composite
def _mutated_config(draw):
    cfg = _demo_dict()
    for _ in range(draw(st.integers(1, 3))):
        spots = [p for p, _v in _paths(cfg) if p]
        path = draw(st.sampled_from(spots))
        parent = cfg
        for k in path[:-1]:
            parent = parent[k]
        last = path[-1]
        op = draw(st.sampled_from(["replace", "replace", "replace", "delete", "add", "deep"]))
        if op == "delete":
            del parent[last]
        elif op == "add" and isinstance(parent, dict):
            parent[draw(_text) or "x"] = draw(_toml_value)
        elif op == "deep":
            parent[last] = Deep(draw(st.sampled_from([3, 50, 5000])))
        else:
            parent[last] = draw(_toml_value)
    return cfg


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(cfg=_mutated_config())
def test_random_config_shapes_give_config_or_input_errors(tmp_path_factory, cfg):
    root = tmp_path_factory.mktemp("cfg")
    path = root / "run.toml"
    path.write_text(_toml(cfg), encoding="utf-8")
    with _hang_guard():
        try:
            config = load_config(path)
        except ConfigError as exc:
            assert exc.problems and all(isinstance(p, str) and p for p in exc.problems)
            event("ConfigError")
            return
        try:
            inputs = read_inputs(config)
        except InputError as exc:
            assert exc.problems
            event("InputError")
            return
    event("read")
    assert len(inputs.lines) + len(inputs.assets) + len(inputs.rejected.rows) > 0


def test_config_fuzzer_writes_valid_toml_for_the_demo(tmp_path):
    """The fuzzer's writer round-trips the unmutated demo config (TOML 1.0 via tomllib),
    so the mutations, not the writer, are what the property test exercises."""
    cfg = _demo_dict()
    path = tmp_path / "run.toml"
    path.write_text(_toml(cfg), encoding="utf-8")
    with open(path, "rb") as fh:
        assert tomllib.load(fh) == cfg
    config = load_config(path)
    assert len(read_inputs(config).assets) == 6  # the demo's six assets (config/demo.toml)


# --- layers -----------------------------------------------------------------------------------

_number = st.one_of(st.none(), st.floats(allow_nan=True, allow_infinity=True),
                    st.floats(-1e3, 1e3), st.integers(-10**9, 10**9))
_word = st.one_of(st.none(), st.sampled_from(["", " ", "220 kV", "nan", "1e400", "5.0", "ground",
                                               "gap", "metal", "wood", "x", "true", "0"]))


def _column(draw, n: int, kind: str):
    """One column of ``n`` values, of one storage type as a GIS file holds it."""
    if kind == "text":
        return [None if v is None else str(v)
                for v in draw(st.lists(st.one_of(_number, _word), min_size=n, max_size=n))]
    if kind == "int":
        return np.array(draw(st.lists(st.integers(-10**6, 10**6), min_size=n, max_size=n)),
                        dtype=np.int64)
    values = draw(st.lists(_number, min_size=n, max_size=n))
    return np.array([np.nan if v is None else float(v) for v in values], dtype=float)


def _geometry(draw, i: int, y: float):
    shape = draw(st.sampled_from(["line", "line", "line", "empty", "far", "nan", "point"]))
    x = X0_M + 100.0 * i
    if shape == "empty":
        return LineString()
    if shape == "point":
        return Point(x, y)
    if shape == "far":
        return LineString([(x, y), (draw(st.sampled_from([1e9, -1e12, 3e7])), y)])
    if shape == "nan":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # NaN coordinates wanted
            return LineString([(x, y), (np.nan, y)])
    return LineString([(x, y), (x + 1500.0, y + draw(st.floats(-50, 50)))])


def _ids(draw, n: int, prefix: str, as_int: bool):
    if as_int:
        return np.arange(1, n + 1, dtype=np.int64) + (0 if prefix == "L" else 100)
    return [None if draw(st.integers(0, 9)) == 0 else f"{prefix}{i}" for i in range(n)]


@st.composite
def _layers(draw):
    n_lines, n_assets, n_grounds = draw(st.integers(1, 3)), draw(st.integers(1, 4)), \
        draw(st.integers(0, 3))
    int_ids = draw(st.booleans())
    arrangement = draw(st.sampled_from([None, "bogus"]))
    lines = {"LINE_ID": _ids(draw, n_lines, "L", int_ids),
             "KV": _column(draw, n_lines, draw(st.sampled_from(["float", "text", "int"]))),
             "IF_KA": _column(draw, n_lines, draw(st.sampled_from(["float", "text"]))),
             "geometry": [_geometry(draw, i, Y0_M - 200.0 * i) for i in range(n_lines)],
             "arrangement": arrangement}
    assets = {"AID": _ids(draw, n_assets, "A", int_ids),
              "KIND": [draw(st.sampled_from(["fence", "pipeline", "hedge", None]))
                       for _ in range(n_assets)],
              "POST_OHM": _column(draw, n_assets, draw(st.sampled_from(["float", "text", "int"]))),
              "POSTS": _column(draw, n_assets, "text"),
              "geometry": [_geometry(draw, i, Y0_M + 100.0 + 50.0 * i) for i in range(n_assets)]}
    grounds = None
    if n_grounds:
        targets = [str(v) for v in assets["AID"] if v is not None] + ["NOPE", None]
        grounds = {"GID": [f"G{i}" for i in range(n_grounds)],
                   "AID": [draw(st.sampled_from(targets)) for _ in range(n_grounds)],
                   "ITEM": _column(draw, n_grounds, "text"),
                   "R": _column(draw, n_grounds, draw(st.sampled_from(["float", "text"]))),
                   "geometry": [Point(X0_M + 200.0 * i, Y0_M + 100.0) for i in range(n_grounds)]}
    return lines, assets, grounds, draw(st.booleans())


def _frame(columns: dict) -> gpd.GeoDataFrame:
    data = {k: v for k, v in columns.items() if k not in ("geometry", "arrangement")}
    return gpd.GeoDataFrame(data, geometry=columns["geometry"], crs=PROJECTED_CRS)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(drawn=_layers())
def test_random_layers_every_feature_kept_or_rejected(tmp_path_factory, drawn):
    lines_cols, asset_cols, ground_cols, defaults = drawn
    sc = Scenario(tmp_path_factory.mktemp("lay"))
    lines = _frame(lines_cols)
    lines["TOWER"] = lines_cols["arrangement"] or sc.arrangement
    assets = _frame(asset_cols)
    cfg = sc.build(lines=lines, assets=assets)
    cfg["layers"]["power_lines"]["fields"]["fault_current_start_ka"] = "IF_KA"
    cfg["layers"]["assets"][0]["fields"]["post_type"] = "POSTS"
    cfg["run"]["use_kind_defaults"] = defaults
    n_in = {"power_lines": len(lines), "assets": len(assets), "grounds": 0}
    if ground_cols is not None:
        g = _frame(ground_cols)
        path = sc.write_layer(g, "grounds")
        cfg["layers"]["grounds"] = {"path": path.name, "layer": "grounds", "fields": {
            "ground_id": "GID", "asset_id": "AID", "item": "ITEM", "resistance_ohm": "R"}}
        n_in["grounds"] = len(g)
    config = load_config(sc.write_config(cfg))
    with _hang_guard(), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # NaN coordinates written on purpose
        try:
            inputs = read_inputs(config)
        except InputError as exc:
            assert exc.problems
            event("InputError")
            return
    event("read")
    kept = {"power_lines": inputs.lines, "assets": inputs.assets, "grounds": inputs.grounds}
    for role, n in n_in.items():
        frame = kept[role]
        rows = inputs.rejected.by_role(role)
        assert len(rows) == len({r["feature_id"] for r in rows}), rows  # one row per feature
        n_kept = 0 if frame is None else len(frame)
        assert n_kept + len(rows) == n, (role, n_kept, rows)
        if frame is not None and len(frame):
            assert not set(frame["feature_id"].astype(str)) & {r["feature_id"] for r in rows}
    for fld, ids in inputs.defaults_used.items():
        pool = set(inputs.lines["line_id"]) | set(inputs.assets["asset_id"])
        assert set(ids) <= pool, fld
    if inputs.grounds is not None and len(inputs.grounds):
        assert set(inputs.grounds["asset_id"]) <= set(inputs.assets["asset_id"])
