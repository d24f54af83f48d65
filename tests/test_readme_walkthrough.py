"""README.md against the running code: Quick start, config examples, demo walkthrough.

- The Quick start installs only what a run needs (no test extra), and the test
  command is the one CI runs verbatim (.ci/run).
- The fenced TOML examples marked ``<!-- README-EXAMPLE: name -->`` parse with
  corridor's own loaders (:func:`corridor.config.load_config`,
  :func:`corridor.config.load_arrangements`), and the minimal config passes
  ``corridor check`` on layers named as it names them.
- Every claim of "Reading the results" is checked against a demo run: the
  ranking table (rank, kind, governing criterion, worst utilization), the rank
  and criterion each bullet names, and each number or remedy a bullet states.
"""

from __future__ import annotations

import logging
import re
from pathlib import Path

import geopandas as gpd
import pyogrio
import pytest
from shapely.geometry import LineString

from corridor.cli import main
from corridor.config import load_arrangements, load_config
from corridor.limits.limit_sets import load_limit_set
from corridor.steps import ground

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
TEST_COMMAND = "python -m pip install -e '.[test]' && python -m pytest"


def example(name: str) -> str:
    """The fenced block that follows ``<!-- README-EXAMPLE: name -->``."""
    m = re.search(rf"<!-- README-EXAMPLE: {re.escape(name)} -->\n```[a-z]*\n(.*?)```",
                  README, flags=re.S)
    assert m, f"README has no example {name}"
    return m.group(1)


def section(title: str) -> str:
    start = README.index(f"\n## {title}\n")
    end = README.find("\n## ", start + 1)
    return README[start:end]


# --- Quick start -----------------------------------------------------------------------

def test_quick_start_installs_only_what_a_run_needs():
    quick = section("Quick start")
    blocks = re.findall(r"```bash\n(.*?)```", quick, flags=re.S)
    assert blocks[0].split("\n")[:2] == ["python -m pip install -e .",
                                         "corridor run config/demo.toml"]
    assert "[test]" not in blocks[0]
    # the test command stays verbatim: CI runs exactly this line
    assert blocks[1].strip() == TEST_COMMAND
    assert TEST_COMMAND in (ROOT / ".ci" / "run").read_text(encoding="utf-8")


# --- config examples -------------------------------------------------------------------

def _user_layers(folder: Path) -> None:
    """Layers named and fielded as the README's minimal config names them (invented)."""
    data = folder / "data"
    data.mkdir()
    x0, y0 = 515_000.0, 5_216_000.0  # UTM 33N, metres
    lines = gpd.GeoDataFrame(
        {"LINE_ID": ["L1"], "KV": [132.0], "TOWER": ["steel_132_single"]},
        geometry=[LineString([(x0, y0), (x0 + 4000.0, y0)])], crs="EPSG:32633")
    pyogrio.write_dataframe(lines, data / "power_lines.gpkg", driver="GPKG")
    fences = gpd.GeoDataFrame(
        {"FENCE_ID": ["F1"]},
        geometry=[LineString([(x0 + 500.0, y0 + 30.0), (x0 + 3000.0, y0 + 30.0)])],
        crs="EPSG:32633")
    pyogrio.write_dataframe(fences, data / "fences.shp", driver="ESRI Shapefile")


def test_minimal_config_and_arrangement_examples_load(tmp_path, capsys):
    (tmp_path / "network.toml").write_text(example("network.toml"), encoding="utf-8")
    (tmp_path / "arrangements.toml").write_text(example("arrangements.toml"), encoding="utf-8")
    arrangements = load_arrangements(tmp_path / "arrangements.toml")
    assert list(arrangements) == ["steel_132_single"]
    _user_layers(tmp_path)
    cfg = load_config(tmp_path / "network.toml")
    assert cfg.run.limit_set == "iec_en" and cfg.run.frequency_hz == 50.0
    assert "steel_132_single" in cfg.arrangements  # the file beside the config is used
    # "corridor check network.toml tells you what it made of your layers"
    try:
        assert main(["check", str(tmp_path / "network.toml")]) == 0
    finally:
        for h in list(logging.getLogger("corridor").handlers):
            logging.getLogger("corridor").removeHandler(h)
    out = capsys.readouterr().out
    assert "1 usable, 0 rejected" in out


# --- demo walkthrough ------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("walkthrough") / "out"
    try:
        assert main(["run", str(ROOT / "config" / "demo.toml"), "--out", str(out), "-q"]) == 0
    finally:
        for h in list(logging.getLogger("corridor").handlers):
            logging.getLogger("corridor").removeHandler(h)
    gpkg = out / "screening.gpkg"
    read = {n: pyogrio.read_dataframe(gpkg, layer=n, read_geometry=False)
            for n in ("assets", "segments", "sites")}
    limits = load_limit_set(load_config(ROOT / "config" / "demo.toml").run.limit_set)
    return {**read, "limits": limits}


def _two_significant(value: float) -> str:
    return f"{float(f'{value:.2g}'):g}"


def test_ranking_table_matches_the_demo(demo):
    text = section("Reading the results")
    table = text.split("<!-- README-CLAIMS: demo ranking -->", 1)[1].strip().split("\n\n")[0]
    rows = [[c.strip().strip("`") for c in line.strip("|").split("|")]
            for line in table.splitlines()[2:]]
    assets = demo["assets"].sort_values("asset_rank")
    assert len(rows) == len(assets)
    for row, (_i, a) in zip(rows, assets.iterrows(), strict=True):
        assert row == [str(a["asset_rank"]), a["asset_id"], a["asset_kind"], a["governing"],
                       _two_significant(a["worst_utilization"])], row


def test_each_bullet_names_its_assets_rank_and_criterion(demo):
    text = section("Reading the results")
    named = re.findall(r"`([A-Z]+-[A-Z0-9-]+)` \(rank (\d+), `([a-z_]+:[a-z]+)`\)", text)
    assets = demo["assets"].set_index("asset_id")
    assert {a for a, _r, _g in named} == set(assets.index)  # every asset, each once
    for asset, rank, governing in named:
        assert int(rank) == assets.loc[asset, "asset_rank"], asset
        assert governing == assets.loc[asset, "governing"], asset


def _seg(demo, asset):
    s = demo["segments"]
    return s[s["asset_id"] == asset]


def _sites(demo, asset):
    s = demo["sites"]
    return s[s["asset_id"] == asset].sort_values("chainage_m")


def _site_at(demo, asset, chainage_m: float):
    """The asset's work-list site at ``chainage_m`` (exactly one)."""
    s = _sites(demo, asset)
    (row,) = [r for _, r in s.iterrows() if r["chainage_m"] == chainage_m]
    return row


def _about(value: float, claimed: float, rel: float = 0.1) -> bool:
    """'about X': within 10 % (the walkthrough rounds to one or two digits)."""
    return abs(value - claimed) <= rel * abs(claimed)


def _criterion_value(demo, name: str) -> float:
    crit = next(c for c in demo["limits"].criteria if c.name == name)
    return float(dict(crit.parameters)["value"])


#: Each sentence of the walkthrough that states a number, a remedy or a fact of the
#: demo, with the check on the demo run that makes it true.
CLAIMS = {
    "runs 9 km beside the 345 kV line at 70 m":
        lambda d: _about(_seg(d, "MBL-12").query("abs(separation_m - 70) < 0.5")["length_m"]
                         .sum(), 9000),
    "it could drive about 150 mA through a\n  person touching it, against a 5 mA limit":
        lambda d: _about(_seg(d, "MBL-12")["i_normal_body_ma"].max(), 150)
        and _criterion_value(d, "steady_state_current") == 5.0,
    "its touch voltage is about\n  9 times its limit":
        lambda d: round(_seg(d, "MBL-12")["ratio_touch_fault"].max()) == 9,
    "grounds through DC decouplers at the\n  peaks and marks the last one unresolved":
        lambda d: (_sites(d, "MBL-12")["remedy"] == ground.REMEDY_DECOUPLED).all()
        and bool(_sites(d, "MBL-12").iloc[-1:]["unresolved"].any())
        and _sites(d, "MBL-12")["unresolved"].sum() == 1,
    "runs 12 m from the 138 kV\n  line":
        lambda d: _seg(d, "FN-MILL-3")["separation_m"].min() == 12.0
        and set(_seg(d, "FN-MILL-3")["line_id"].dropna()) == {"VPC-138-B"},
    "it reaches about 31 V, twice the 15 V limit":
        lambda d: _about(_seg(d, "FN-MILL-3")["v_normal_v"].max(), 31)
        and round(_seg(d, "FN-MILL-3")["ratio_steady_state_voltage"].max()) == 2
        and _criterion_value(d, "steady_state_voltage") == 15.0,
    "its touch voltage reaches about 1.7 kV, part of it the earth potential rise":
        lambda d: _about(_seg(d, "FN-MILL-3")["v_touch_fault_v"].max(), 1700)
        and _seg(d, "FN-MILL-3")["earth_potential_fault_v"].max() > 0,
    "drives about 1.2 kV onto the track":
        lambda d: _about(_seg(d, "BVR-1")["v_fault_v"].max(), 1200),
    "The work list grounds it at 6 sites, the\n  last one unresolved":
        lambda d: len(_sites(d, "BVR-1")) == 6
        and (_sites(d, "BVR-1")["remedy"] == ground.REMEDY_GROUND).all()
        and _sites(d, "BVR-1")["unresolved"].sum() == 1,
    "wooden-post fence 15 m from the 138 kV line, on posts of 5 kΩ each":
        lambda d: _seg(d, "FN-RIDGE-2")["separation_m"].min() == 15.0
        and _input_fence(d, "FN-RIDGE-2")[["POSTS", "POST_OHM"]].tolist() == ["wood", 5000.0],
    "(`v_capacitive_open_v` well under 1 V)":
        lambda d: _seg(d, "FN-RIDGE-2")["v_capacitive_open_v"].max() < 0.2,
    "about 6 times the touch limit":
        lambda d: round(_seg(d, "FN-RIDGE-2")["ratio_touch_fault"].max()) == 6,
    "reaches about 3.5 kV in a fault on the 345 kV\n  line, over 5 times the ITU-T 650 V limit"
    " for a high-reliability line":
        lambda d: _about(_seg(d, "TC-VALE-3")["emf_section_fault_v"].max(), 3500)
        and _seg(d, "TC-VALE-3")["utilization"].max() > 5
        and bool(_seg(d, "TC-VALE-3")["high_reliability"].any())
        and set(_seg(d, "TC-VALE-3")["fault_line_id"].dropna()) == {"VPC-345-A"},
    "the remedy is\n  protectors or isolation, not grounding":
        lambda d: (_sites(d, "TC-VALE-3")["remedy"] == ground.REMEDY_TELECOM).all()
        and _sites(d, "TC-VALE-3")["ground_resistance_ohm"].isna().all(),
    "25 m from\n  the 345 kV line on metal posts of 150 Ω each":
        lambda d: _seg(d, "FN-HOLLOW-1")["separation_m"].min() == 25.0
        and _input_fence(d, "FN-HOLLOW-1")[["POSTS", "POST_OHM"]].tolist() == ["metal", 150.0],
    "it still reaches about\n  25 V, 1.7 times the 15 V limit":
        lambda d: _about(_seg(d, "FN-HOLLOW-1")["v_normal_v"].max(), 25)
        and round(_seg(d, "FN-HOLLOW-1")["ratio_steady_state_voltage"].max(), 1) == 1.7,
    "A ground at chainage 5500 m brings that down to\n  about 12 V":
        lambda d: _site_at(d, "FN-HOLLOW-1", 5500.0)["remedy"] == ground.REMEDY_GROUND
        and _about(_site_at(d, "FN-HOLLOW-1", 5500.0)["v_before_v"], 25)
        and _about(_site_at(d, "FN-HOLLOW-1", 5500.0)["v_after_v"], 12),
    "Its other site, at chainage 950 m, stands in a faulted tower's zone\n  of influence":
        lambda d: len(_sites(d, "FN-HOLLOW-1")) == 2
        and bool(_site_at(d, "FN-HOLLOW-1", 950.0)["in_tower_zone"]),
    "the remedy is to keep clear of the tower\n  footing, and the site is unresolved":
        lambda d: _site_at(d, "FN-HOLLOW-1", 950.0)["remedy"] == ground.REMEDY_TOWER
        and bool(_site_at(d, "FN-HOLLOW-1", 950.0)["unresolved"]),
}


def _input_fence(demo, fence_id: str):
    fences = pyogrio.read_dataframe(ROOT / "sample_layers" / "brackenford_vale.gpkg",
                                    layer="fences", read_geometry=False)
    return fences.set_index("FENCE_ID").loc[fence_id]


@pytest.mark.parametrize("claim", list(CLAIMS))
def test_walkthrough_claim_holds_on_the_demo(demo, claim):
    assert claim in section("Reading the results"), "claim no longer in the README"
    assert CLAIMS[claim](demo), claim


def test_walkthrough_numbers_are_all_checked():
    # every number with a unit in the bullets belongs to a checked claim
    text = section("Reading the results").split("| 6 |", 1)[1]
    checked = " ".join(CLAIMS)
    for m in re.finditer(r"\d[\d.]*\s?(?:kV|V|mA|m|km|kΩ|Ω|times)\b", text):
        snippet = m.group(0)
        if "docs/" in text[max(0, m.start() - 30):m.start()]:
            continue
        assert snippet in checked, snippet
