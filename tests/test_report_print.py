"""The report prints to PDF on A4 and Letter landscape with no clipped column.

Outside references: Debian's headless Chromium prints the production report
(``--print-to-pdf``), and pypdf reads the PDF back. Paper sizes: ISO 216 A4 is
210 x 297 mm (841.9 x 595.3 pt landscape); ANSI Letter is 8.5 x 11 in
(792 x 612 pt landscape). The report's own ``@page`` rule asks for landscape on
the printer's paper; the test prints it once with the paper named A4 and once
with Letter.
"""

from __future__ import annotations

import html
import re
import shutil
import subprocess
import unicodedata
from pathlib import Path

import pytest

from corridor.config import load_config
from corridor.pipeline import run_screening
from corridor.report import write_report
from corridor.report.style import PAGE_RULE
from corridor.steps import asset_stages, run_stages

pypdf = pytest.importorskip("pypdf", reason="pypdf is in the test extra: pip install -e .[test]")

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"
CHROMIUM = shutil.which("chromium") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None)

pytestmark = [
    pytest.mark.chromium,
    pytest.mark.slow,
    pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium is not installed (Debian"
                                                " package chromium); .ci/run installs it"),
]

#: Landscape page sizes [pt]: ISO 216 A4, ANSI Letter.
PAPER = {"A4": (841.89, 595.28), "letter": (792.0, 612.0)}


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    run = run_screening(load_config(DEMO), asset_stages(), run_stages())
    return write_report(run, tmp_path_factory.mktemp("report"))


def _print(report: Path, paper: str, tmp_path: Path) -> Path:
    text = report.read_text(encoding="utf-8")
    assert PAGE_RULE in text  # the stylesheet the report carries
    named = PAGE_RULE.replace("size:landscape", f"size:{paper} landscape")
    page = tmp_path / f"report-{paper}.html"
    page.write_text(text.replace(PAGE_RULE, named), encoding="utf-8")
    pdf = tmp_path / f"report-{paper}.pdf"
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={tmp_path / 'profile'}", "--no-pdf-header-footer",
           f"--print-to-pdf={pdf}", page.as_uri()]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=180, check=False)
    assert pdf.exists() and pdf.stat().st_size > 10_000, res.stderr[-2000:]
    return pdf


def _headers(text: str) -> list[str]:
    """Every table header's text in the HTML, as a reader sees it."""
    out = []
    for th in re.findall(r"<th>(.*?)</th>", text, flags=re.S):
        plain = " ".join(html.unescape(re.sub(r"<[^>]+>", " ", th)).split())
        if plain:
            out.append(plain)
    return sorted(set(out))


@pytest.mark.parametrize("paper", sorted(PAPER))
def test_report_prints_on_landscape_paper_without_clipping(report, tmp_path, paper):
    pdf = _print(report, paper, tmp_path)
    reader = pypdf.PdfReader(str(pdf))
    n = len(reader.pages)
    # a sane count: the demo's tables, map and six profiles, not one page per row
    assert 4 <= n <= 40, n
    width, height = PAPER[paper]
    xs: list[float] = []
    words: list[str] = []
    for page in reader.pages:
        box = page.mediabox
        assert float(box.width) == pytest.approx(width, abs=1.0)
        assert float(box.height) == pytest.approx(height, abs=1.0)

        def visit(text, cm, tm, _font, _size):
            if text.strip():
                # device x of the text run: the text matrix's origin through the CTM
                xs.append(tm[4] * cm[0] + tm[5] * cm[2] + cm[4])

        words.append(page.extract_text(visitor_text=visit))
    assert xs and min(xs) >= 0.0
    # every text run starts inside the page, left of its right margin
    assert max(xs) <= width - 5.0, max(xs)
    # NFKC folds the typographic ligatures the PDF's fonts use ("ﬁ" -> "fi")
    pdf_text = " ".join(unicodedata.normalize("NFKC", " ".join(words)).split())
    missing = [h for h in _headers(report.read_text(encoding="utf-8")) if h not in pdf_text]
    assert not missing, missing
    # the work list's last column and the ranked assets' line ids are printed
    assert "Unresolved / notes" in pdf_text and "Power line ids" in pdf_text
