"""A power line rejected between two runs: the change report and the report say so.

The demo corridor (config/demo.toml, invented) is run, then its 138 kV line
VPC-138-B gets a NULL voltage, as a broken export would give. Before, the
line drove the exceedances of BVR-1 and FN-MILL-3 (the assets layer names it
in their ``line_ids``). After, those exceedances are gone because the line is,
not because anything was fixed: changes.csv must say "line rejected", never
"resolved exceedance", and the report must open with a banner naming the line.
"""

from __future__ import annotations

import html
import logging
import shutil
from pathlib import Path

import pyogrio
import pytest

from corridor.cli import main
from corridor.io.outputs import read_csv

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("rejected_line")
    (root / "config").mkdir()
    (root / "sample_layers").mkdir()
    for name in ("demo.toml",):
        shutil.copy(REPO / "config" / name, root / "config" / name)
    gpkg = root / "sample_layers" / "brackenford_vale.gpkg"
    shutil.copy(REPO / "sample_layers" / "brackenford_vale.gpkg", gpkg)
    cfg, out = root / "config" / "demo.toml", root / "out"
    assert main(["run", str(cfg), "--out", str(out), "-q"]) == 0
    before = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets", read_geometry=False)
    lines = pyogrio.read_dataframe(gpkg, layer="power_lines")
    lines.loc[lines["LINE_ID"] == "VPC-138-B", "KV"] = None
    pyogrio.write_dataframe(lines, gpkg, layer="power_lines", driver="GPKG")
    rc = main(["run", str(cfg), "--out", str(out), "-q"])
    for h in list(logging.getLogger("corridor").handlers):
        logging.getLogger("corridor").removeHandler(h)
    return before, out, rc


def test_outputs_published_and_line_in_rejected_csv(two_runs):
    _before, out, rc = two_runs
    assert rc in (0, 5)  # 5: "a power line was rejected" once the runner knows it
    rej = read_csv(out / "rejected.csv", dtype=str)
    assert "VPC-138-B" in rej["feature_id"].tolist()


def test_changes_name_line_rejected_not_resolved(two_runs):
    before, out, _rc = two_runs
    changes = read_csv(out / "changes.csv")
    after = pyogrio.read_dataframe(out / "screening.gpkg", layer="assets", read_geometry=False)
    now = dict(zip(after["asset_id"], after["worst_utilization"], strict=True))
    driven = before[(before["worst_utilization"] >= 1.0)
                    & before["line_ids"].str.split(";").map(lambda v: "VPC-138-B" in v)]
    gone = [a for a in driven["asset_id"] if now[a] < 1.0]  # exceedance disappeared
    assert set(gone) >= {"BVR-1", "FN-MILL-3"}  # they exceed because of the 138 kV line
    for aid in gone:
        row = changes[changes["asset_id"] == aid]
        assert len(row) == 1, aid
        assert row["change"].iloc[0] == "line rejected", aid
        assert row["cause"].iloc[0].startswith("line rejected: VPC-138-B"), aid
    assert "resolved exceedance" not in changes["change"].tolist()


def test_report_banner_names_the_line(two_runs):
    _before, out, _rc = two_runs
    text = (out / "report.html").read_text(encoding="utf-8")
    start = text.index('id="rejected-lines"')
    assert start < text.index('class="caution"')
    banner = text[start:text.index("</div>", start)]
    assert "VPC-138-B" in banner and html.escape("missing") in banner
