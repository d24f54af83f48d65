"""The report shows what decides each result: the work list, ranked assets, criteria.

The report is built by the production function (:func:`corridor.report.write_report`)
from a real demo run; every expectation is read from the run's own tables (segment
table, grounding sites, limit set), never from the report itself. The permitted
touch voltage is checked against IEEE Std 80-2013's formula (clause 8.3, from
memory): E_touch = (1000 + 1.5·Cs·ρs)·0.116/√t for a 50 kg body, Cs = 1 on
native soil.
"""

from __future__ import annotations

import html
import math
import re
from pathlib import Path

import numpy as np
import pytest

from corridor.config import load_config
from corridor.limits.limit_sets import COMPUTED_QUANTITIES
from corridor.pipeline import run_screening
from corridor.report import write_report
from corridor.steps import asset_stages, run_stages

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
UNITS = {"kV": 1000.0, "V": 1.0, "mA": 1.0, "A/m²": 1.0}


@pytest.fixture(scope="module")
def demo_run():
    return run_screening(load_config(DEMO), asset_stages(), run_stages())


@pytest.fixture(scope="module")
def text(demo_run, tmp_path_factory) -> str:
    return write_report(demo_run, tmp_path_factory.mktemp("report")).read_text(encoding="utf-8")


def _section(text: str, sid: str) -> str:
    start = text.index(f'<section id="{sid}"')
    return text[start:text.index("</section>", start)]


def _plain(cell: str) -> str:
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", cell)).split())


def _rows(section: str) -> tuple[list[str], list[list[str]]]:
    """Header texts and body cells (plain text) of the first table in ``section``."""
    head = [_plain(h) for h in re.findall(r"<th>(.*?)</th>", section, flags=re.S)]
    body = section[section.index("<tbody>"):section.index("</tbody>")]
    rows = [[_plain(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", tr, flags=re.S)]
            for tr in re.findall(r"<tr>(.*?)</tr>", body, flags=re.S)]
    return head, rows


def _value(cell: str) -> tuple[float, str]:
    """A shown value and its unit, e.g. "1.69 kV" -> (1690.0, "V")."""
    m = re.fullmatch(r"(-?[\d.,]+)\s*(kV|V|mA|A/m²)?", cell.strip())
    assert m, cell
    v = float(m.group(1).replace(",", ""))
    unit = m.group(2) or ""
    return v * UNITS.get(unit, 1.0), ("V" if unit == "kV" else unit)


def _expected(run, pos: int, label: str | None = None):
    """The criterion, judged value and ratio of segment ``pos``, from the run's tables."""
    t = run.segment_table
    row = t.iloc[pos]
    c = run.limit_set[str(label or row["governing"]).split(":")[0]]
    ratio = float(row[f"ratio_{c.name}"])
    value = abs(float(row[c.quantity])) if c.quantity in t else ratio
    return c, value, ratio


def test_report_opens_with_work_list_then_ranked_assets(text):
    order = [text.index(s) for s in ('class="caution"', 'id="worklist"', 'id="worst-assets"',
                                     'id="summary"', 'id="map"')]
    assert order == sorted(order)


def test_work_list_has_every_site_worst_first_with_its_deciding_value(demo_run, text):
    sites = demo_run.grounding_sites
    t = demo_run.segment_table
    assert len(sites) > 0  # the demo exceeds limits (sample_layers/make_demo.py)
    head, rows = _rows(_section(text, "worklist"))
    for want in ("Site id", "Asset", "Chainage [km]", "Remedy", "Deciding criterion",
                 "Deciding value before", "After all proposed grounds", "Limit",
                 "Ground resistance [Ω]", "Electrode length [m]", "Power line ids",
                 "Unresolved / notes"):
        assert want in head, want
    col = {h: i for i, h in enumerate(head)}
    assert sorted(r[col["Site id"]] for r in rows) == sorted(sites["site_id"].astype(str))
    by_id = sites.set_index("site_id")
    ratios = []
    for r in rows:
        site = by_id.loc[r[col["Site id"]]]
        assert r[col["Asset"]].startswith(str(site["asset_id"]))
        assert html.unescape(str(site["remedy"])) == r[col["Remedy"]]
        assert float(r[col["Chainage [km]"]]) == pytest.approx(site["chainage_m"] / 1e3,
                                                                abs=5e-4 * max(
                                                                    1, site["chainage_m"] / 1e3))
        assert ("UNRESOLVED" in r[col["Unresolved / notes"]]) == bool(site["unresolved"])
        coords = r[col["Coordinates [m] (lat, lon)"]]
        assert f"{site['x']:.1f} E" in coords and f"{site['y']:.1f} N" in coords
        assert f"{site['lat']:.5f}°, {site['lon']:.5f}°" in coords
        assert set(r[col["Power line ids"]].replace(" ", "").split(";")) == set(
            str(site["line_ids"]).split(";"))
        if np.isfinite(site["ground_resistance_ohm"]):
            assert float(r[col["Ground resistance [Ω]"]]) == pytest.approx(
                site["ground_resistance_ohm"], rel=5e-3)
        else:
            assert r[col["Ground resistance [Ω]"]] == "–"
        # the deciding value is the site criterion's quantity at a segment touching the site
        seg = t.index[(t["asset_id"] == site["asset_id"])
                      & (t["chainage_m"] <= site["chainage_m"] + 1e-6)
                      & (t["chainage_m"] + t["length_m"] >= site["chainage_m"] - 1e-6)]
        options = [_expected(demo_run, t.index.get_loc(i), site["governing"]) for i in seg]
        shown, unit = _value(r[col["Deciding value before"]])
        c = options[0][0]
        names = {c.plain_name(float(t.loc[i, "clearing_time_s"]) if c.uses_clearing_time
                              else None) for i in seg}
        assert r[col["Deciding criterion"]] in names
        assert any(shown == pytest.approx(v, rel=6e-3) for _, v, _ in options), (shown, options)
        ratios.append(float(r[col["Ratio to limit, before → after"]].split("→")[0]))
    assert ratios == sorted(ratios, reverse=True)  # worst first


def test_ranked_assets_show_the_deciding_quantity_and_limit(demo_run, text):
    t = demo_run.segment_table
    head, rows = _rows(_section(text, "worst-assets"))
    col = {h: i for i, h in enumerate(head)}
    assert [r[col["Asset"]] for r in rows] == list(demo_run.assets["asset_id"].astype(str))
    for r in rows:
        aid = r[col["Asset"]]
        mine = np.flatnonzero(t["asset_id"].to_numpy(dtype=object) == aid)
        worst = mine[np.argmax(t["utilization"].to_numpy(float)[mine])]
        c, value, ratio = _expected(demo_run, int(worst))
        clearing = float(t["clearing_time_s"].iloc[worst])
        assert r[col["Deciding criterion"]] == c.plain_name(
            clearing if c.uses_clearing_time else None)
        shown, unit = _value(r[col["Deciding value"]])
        assert shown == pytest.approx(value, rel=6e-3)
        limit, limit_unit = _value(r[col["Limit"]])
        assert limit == pytest.approx(value / ratio, rel=6e-3) and limit_unit == unit
        assert float(r[col["Ratio to limit"]]) == pytest.approx(ratio, rel=6e-3)
        if c.quantity == "v_touch_fault_v" and c.method == "ieee80_touch":
            # IEEE Std 80-2013 clause 8.3 (from memory): 50 kg, native soil (Cs = 1)
            rho = float(t["soil_resistivity_ohm_m"].iloc[worst])
            assert limit == pytest.approx((1000 + 1.5 * rho) * 0.116 / math.sqrt(clearing),
                                          rel=6e-3)


def test_telecom_row_shows_its_emf_not_the_voltage(demo_run, text):
    # An asset judged by its longitudinal EMF shows that EMF (in kV here), not |V|.
    t = demo_run.segment_table
    _, rows = _rows(_section(text, "worst-assets"))
    tele = demo_run.assets[demo_run.assets["asset_kind"] == "telecom"]
    assert len(tele)
    for aid in tele["asset_id"]:
        row = next(r for r in rows if r[1] == aid)
        mine = t[t["asset_id"] == aid]
        worst = mine.loc[mine["utilization"].idxmax()]
        emf = float(worst["emf_section_fault_v"])
        assert str(worst["governing"]).startswith("telecom")
        shown, _ = _value(row[4])
        assert shown == pytest.approx(emf, rel=6e-3)
        assert shown != pytest.approx(float(worst["v_fault_v"]), rel=0.05)
        if emf >= 1000:
            assert row[4].endswith("kV")


def test_no_internal_ids_or_column_names_are_shown(demo_run, text):
    visible = re.sub(r"<style>.*?</style>", "", text, flags=re.S)
    visible = html.unescape(re.sub(r"<[^>]+>", " ", visible))
    for c in demo_run.limit_set.criteria:
        assert c.label not in visible, c.label
    for q in COMPUTED_QUANTITIES:
        assert not re.search(rf"\b{q}\b", visible), q
    # plot text: no raw column name at all (snake_case tokens)
    svg_text = " ".join(re.findall(r"<text[^>]*>(.*?)</text>", text, flags=re.S))
    assert svg_text  # matplotlib SVG keeps text as text (svg.fonttype none)
    assert not re.findall(r"\b[a-z0-9]+_[a-z0-9_]+\b", html.unescape(svg_text))
    assert "(judged)" not in svg_text


def test_profiles_draw_the_limit_and_the_fault_scan_envelope(demo_run, text):
    section = _section(text, "profiles")
    figures = re.findall(r'<figure class="profile".*?</figure>', section, flags=re.S)
    assert figures
    for fig in figures:
        words = html.unescape(" ".join(re.findall(r"<text[^>]*>(.*?)</text>", fig, flags=re.S)))
        assert "limit:" in words
        assert "worst of the" in words and "fault positions" in words
        assert "chainage along the asset [km]" in words


def test_criteria_table_and_values_to_verify(demo_run, text):
    ls = demo_run.limit_set
    section = html.unescape(_section(text, "limits"))
    for c in ls.criteria:
        for part in (c.plain_name(), c.formula, c.source, c.edition):
            assert part and part in section, (c.name, part)
        if c.method == "constant":
            assert f"{c.params['value']:g}" in section
    assumptions = html.unescape(_section(text, "assumptions"))
    verify = [c for c in ls.criteria if c.to_verify]
    assert verify and len(verify) < len(ls.criteria)  # NACE's values are published
    for c in verify:
        assert c.plain_name() in assumptions
    doc = html.unescape(text)
    assert doc.count("value to be verified against the standard's text") == 1
    assert "from memory" not in doc
    # the defaults the run used are listed there too
    assert f"{demo_run.config.run.default_soil_resistivity_ohm_m:g} Ω·m" in assumptions
    assert "Clearing time 0.5 s" in assumptions  # config/demo.toml [line_defaults]


def test_work_list_says_when_no_site_is_proposed(demo_run, tmp_path):
    import copy

    run = copy.copy(demo_run)
    run.grounding_sites = demo_run.grounding_sites.iloc[:0]
    run.sites = None
    section = _section(write_report(run, tmp_path).read_text(encoding="utf-8"), "worklist")
    assert "No site proposed" in section and "<table" not in section
