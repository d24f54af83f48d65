"""The HTML report: self-contained, complete, and rendered by a real browser.

Outside references: the HTML/SVG text itself (no fetchable URL outside xmlns
namespace names, which browsers never fetch: W3C "Namespaces in XML 1.0"
§2.1), :mod:`hashlib` for the SHA-256 prefixes the summary shows, and Debian's
headless Chromium rendering the file offline (screenshot not blank, no
console errors, rendered DOM holds the sections and figures).
"""

from __future__ import annotations

import hashlib
import html
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from corridor.config import load_config
from corridor.io.outputs import SAFETY_CAUTION
from corridor.limits.limit_sets import QUANTITY_TITLES
from corridor.pipeline import run_screening
from corridor.report import write_report
from corridor.steps import asset_stages, run_stages

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
CHROMIUM = shutil.which("chromium") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="headless Chromium is not installed (Debian package chromium);"
                             " .ci/run installs it")

SECTIONS = ("worklist", "worst-assets", "summary", "changes", "map", "worst-exposures",
            "worst-segments", "profiles", "rejected", "defaults", "limits", "assumptions")


@pytest.fixture(scope="module")
def demo_run():
    return run_screening(load_config(DEMO), asset_stages(), run_stages())


@pytest.fixture(scope="module")
def report(demo_run, tmp_path_factory) -> Path:
    return write_report(demo_run, tmp_path_factory.mktemp("report"))


@pytest.fixture(scope="module")
def text(report) -> str:
    return report.read_text(encoding="utf-8")


def test_no_fetchable_references(text):
    # Namespace names are identifiers, never fetched (Namespaces in XML 1.0 §2.1);
    # any other http(s) URL could be a network fetch.
    stripped = re.sub(r'\sxmlns(:\w+)?="[^"]*"', "", text)
    assert not re.search(r"https?://", stripped), re.findall(r".{40}https?://.{40}", stripped)
    assert not re.search(r"<script\b", text, flags=re.I)
    assert not re.search(r"<link\b", text, flags=re.I)
    assert not re.search(r"@import|@font-face", text, flags=re.I)
    # Every src/href is inline data or a fragment within the page.
    for ref in re.findall(r'(?:src|href)="([^"]*)"', text):
        assert ref.startswith(("data:", "#")), ref
    for ref in re.findall(r"url\(([^)]*)\)", text):
        assert ref.strip("'\"").startswith(("data:", "#")), ref


def test_sections_and_caution(text, demo_run):
    for sid in SECTIONS:
        assert f'id="{sid}"' in text, sid
    caution = html.escape(SAFETY_CAUTION)  # the stdlib's HTML escaping as reference
    assert caution in text
    # The caution comes before every section (prominent): common practice for
    # safety notices, which lead the document.
    assert text.index(caution) < text.index('id="summary"')
    assert demo_run.limit_set.name in text
    for edition in demo_run.limit_set.editions:
        assert html.escape(edition) in text
    assert "EPSG:32615" in text  # config/demo.toml run.crs


def test_inputs_show_sha256_prefix(text):
    # hashlib is the independent reference for the digest shown.
    for path in (DEMO, REPO / "sample_layers" / "brackenford_vale.gpkg"):
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
        assert digest[:16] in text, path.name


def test_one_profile_per_asset_over_a_limit(text, demo_run):
    assets = demo_run.assets
    n_over = int((assets["worst_utilization"].to_numpy(float) >= 1.0).sum())
    assert n_over > 0  # the demo is built to exceed limits (sample_layers/make_demo.py)
    n_profiles = len(re.findall(r'<figure class="profile"', text))
    assert n_profiles == min(n_over, 20)
    # one inline SVG for the map plus one per profile
    assert len(re.findall(r"<svg\b", text)) == 1 + n_profiles


def test_profile_cap_says_how_many_are_left_out(demo_run, tmp_path):
    assets = demo_run.assets
    n_over = int((assets["worst_utilization"].to_numpy(float) >= 1.0).sum())
    text = write_report(demo_run, tmp_path, max_profiles=1).read_text(encoding="utf-8")
    assert len(re.findall(r'<figure class="profile"', text)) == 1
    assert f"{n_over - 1} more assets over a limit are not plotted" in text


def test_change_section_generic(demo_run, tmp_path):
    text = write_report(demo_run, tmp_path).read_text(encoding="utf-8")
    if demo_run.changes is None:
        assert "First run" in text
    # A changes frame of any shape is shown as it is, with the previous run's time.
    saved = demo_run.changes
    try:
        demo_run.changes = pd.DataFrame(
            {"asset_id": ["X-1"], "change": ["worse"], "note": ["<b>escaped</b>"]})
        text = write_report(demo_run, tmp_path, previous={"finished_utc": "then"}).read_text(
            encoding="utf-8")
    finally:
        demo_run.changes = saved
    section = text[text.index('id="changes"'):text.index('id="map"')]
    assert "X-1" in section and "worse" in section and "then" in section
    assert "&lt;b&gt;escaped&lt;/b&gt;" in section  # table cells are HTML-escaped


def _variant(run, rejected_rows=(), defaults_used=None, **run_settings):
    """A shallow copy of ``run`` with other rejected rows, defaults and run settings."""
    import copy

    from corridor.io.layers import Rejected

    out = copy.copy(run)
    out.inputs = copy.copy(run.inputs)
    out.inputs.rejected = Rejected()
    out.inputs.rejected.rows.extend(dict(r) for r in rejected_rows)
    if defaults_used is not None:
        out.inputs.defaults_used = defaults_used
    if run_settings:
        out.config = run.config.with_run(**run_settings)
    return out


LINE_ROW = {"layer": "brackenford_vale.gpkg:power_lines", "feature_id": "VPC-138-B",
            "field": "KV", "reason": "not a number: '220 kV'", "role": "power_lines"}
ASSET_ROW = {"layer": "brackenford_vale.gpkg:fences", "feature_id": "FN-BAD-9",
             "field": "POST_OHM", "reason": "below the valid range", "role": "assets"}


@pytest.mark.parametrize("accepted", [False, True])
def test_report_opens_with_rejected_line_banner(demo_run, tmp_path, accepted):
    run = _variant(demo_run, [LINE_ROW, ASSET_ROW], accept_rejected_lines=accepted)
    text = write_report(run, tmp_path).read_text(encoding="utf-8")
    banner = text[text.index('id="rejected-lines"'):]
    banner = banner[:banner.index("</div>")]
    # the banner opens the report: before the caution and every section
    assert text.index('id="rejected-lines"') < text.index('class="caution"')
    assert "VPC-138-B" in banner and html.escape("not a number: '220 kV'") in banner
    assert "incomplete" in banner.lower() and "FN-BAD-9" not in banner
    assert ("accept_rejected_lines" in banner) == accepted  # the banner stays when accepted
    # rejected assets are tabled
    section = text[text.index('id="rejected"'):text.index('id="defaults"')]
    assert "FN-BAD-9" in section and "below the valid range" in section


def test_rejected_line_found_by_layer_without_role(demo_run, tmp_path):
    row = {k: v for k, v in LINE_ROW.items() if k != "role"}
    row["layer"] = demo_run.config.power_lines.label
    text = write_report(_variant(demo_run, [row]), tmp_path).read_text(encoding="utf-8")
    assert 'id="rejected-lines"' in text


def test_no_banner_without_rejected_lines(text):
    assert 'id="rejected-lines"' not in text
    assert "No input feature was rejected." in text


def test_defaults_counted_per_field_with_ids_of_safety_fields(demo_run, tmp_path):
    used = {"clearing_time_s": ["VPC-345-A", "VPC-138-B"], "post_type": ["FN-MILL-3"],
            "coating_type": ["MBL-12"], "end_termination": ["TC-VALE-3"],
            "wire_count": ["FN-RIDGE-2", "FN-HOLLOW-1"]}
    text = write_report(_variant(demo_run, defaults_used=used), tmp_path).read_text(
        encoding="utf-8")
    section = text[text.index('id="defaults"'):text.index('id="limits"')]
    rows = {m.group(1): m.group(2) for m in re.finditer(
        r"<tr><td><code>(\w+)</code></td>(.*?)</tr>", section)}
    assert set(rows) == set(used)
    for fld, ids in used.items():
        assert f"<td class='n'>{len(ids)}</td>" in rows[fld], fld
        listed = all(i in rows[fld] for i in ids)
        assert listed == (fld != "wire_count"), fld  # ids only for safety-relevant fields


def test_not_assessed_criteria_are_loud(demo_run, tmp_path):
    # project safety rule: a criterion that cannot be assessed never passes silently. The
    # demo assesses every ieee_na criterion (step voltage beside faulted towers, ISO 18086
    # with its J_ac fallback), so a row as the assess step writes it is put on the run.
    assert demo_run.record["not_assessed"] == []
    row = {"criterion": "ac_corrosion_ratio", "label": "ac_corrosion_ratio:normal",
           "quantity": "iso18086_density_ratio_with_dc", "segments": 12,
           "reason": "no stage computes iso18086_density_ratio_with_dc: it needs"
                     " dc_current_density_a_per_m2, which the input layers do not provide"}
    saved = demo_run.record["not_assessed"]
    demo_run.record["not_assessed"] = [row]
    try:
        text = write_report(demo_run, tmp_path).read_text(encoding="utf-8")
    finally:
        demo_run.record["not_assessed"] = saved
    banner = text[text.index('id="not-assessed"'):]
    banner = banner[:banner.index("</div>")]
    assert text.index('id="not-assessed"') < text.index('id="summary"')
    assert "did NOT pass" in banner
    # the criterion by its plain name from the limit set, never its internal id
    name = demo_run.limit_set["ac_corrosion_ratio"].plain_name()
    assert html.escape(name) in banner and row["label"] not in banner
    # the reason, its quantity named in words (the limit set's title), the input field kept
    assert "iso18086_density_ratio_with_dc" not in banner
    assert html.escape(QUANTITY_TITLES["iso18086_density_ratio_with_dc"]) in banner
    assert "dc_current_density_a_per_m2" in banner
    limits = text[text.index('id="limits"'):text.index('id="assumptions"')]
    assert limits.count("NOT ASSESSED") == 1


def _chromium(args: list[str], tmp_path: Path) -> subprocess.CompletedProcess:
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}",
           "--enable-logging=stderr", "--v=0", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=90, check=False)


def _console_errors(stderr: str) -> list[str]:
    # Chromium prints page console messages as "...:CONSOLE(n)] ..." and failed
    # loads as "Failed to load resource" / "net::ERR_"; the rest of its stderr
    # (D-Bus, GPU probing in a container) is not about the page.
    return [line for line in stderr.splitlines()
            if ("CONSOLE" in line and re.search(r"Uncaught|Error|ERROR", line))
            or "Failed to load resource" in line or "net::ERR_" in line]


@pytest.mark.slow
@pytest.mark.chromium
@needs_chromium
def test_chromium_renders_report_offline(report, tmp_path):
    png = tmp_path / "report.png"
    res = _chromium([f"--screenshot={png}", "--window-size=1280,4000",
                     report.resolve().as_uri()], tmp_path)
    assert png.exists(), res.stderr[-2000:]
    assert not _console_errors(res.stderr)
    assert png.stat().st_size > 50_000  # a blank 1280x4000 PNG is a few kB
    from PIL import Image

    with Image.open(png) as im:
        rgb = np.asarray(im.convert("RGB"))
    assert rgb.shape[:2] == (4000, 1280)
    # Many distinct colours: text antialiasing, the ramp, the map and plots.
    colours = np.unique(rgb.reshape(-1, 3) @ np.array([65536, 256, 1]))
    assert len(colours) > 200
    # The caution box's red border is on screen (its colour is in the CSS).
    assert (np.abs(rgb.astype(int) - [0xB8, 0x32, 0x2F]).sum(axis=2) < 30).sum() > 500


@pytest.mark.slow
@pytest.mark.chromium
@needs_chromium
def test_chromium_dom_has_sections_and_figures(report, tmp_path):
    res = _chromium(["--dump-dom", report.resolve().as_uri()], tmp_path)
    assert res.returncode == 0, res.stderr[-2000:]
    dom = res.stdout
    assert not _console_errors(res.stderr)
    for heading in ("Grounding work list", "Ranked assets", "Summary", "Overview map",
                    "Worst exposures", "Worst segments", "Profiles of assets over a limit",
                    "Criteria", "Assumptions"):
        assert f">{heading}</h2>" in dom, heading
    assert len(re.findall(r"<svg\b", dom)) >= 2


@pytest.mark.slow
@pytest.mark.chromium
@needs_chromium
def test_console_error_filter_catches_a_script_error(tmp_path):
    # Control for the two browser tests above: a page that throws must be caught
    # by the same stderr filter, or their "no console errors" checks prove nothing.
    page = tmp_path / "throws.html"
    page.write_text("<!DOCTYPE html><p>x</p><script>throw new Error('boom')</script>",
                    encoding="utf-8")
    res = _chromium(["--dump-dom", page.as_uri()], tmp_path)
    assert any("boom" in line for line in _console_errors(res.stderr)), res.stderr[-2000:]
