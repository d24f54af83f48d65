"""The methods document: citations resolve, and its derived numbers are right.

Code, tests and docs cite ``docs/methods.md`` by section ("docs/methods.md §1",
"§2.6"). These tests check that every cited section exists in the document, that no
file cites a methods document outside ``docs/``, that the document cites nothing
outside the repository, and that the numbers the document marks as derived agree with
their closed forms, evaluated here independently with mpmath.
"""

from __future__ import annotations

import re
from pathlib import Path

import mpmath as mp
import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "methods.md"

#: Folders and files scanned for citations.
SCANNED_ROOTS = ("corridor", "tests", "benchmarks", "config", "docs", "README.md",
                 "DEVELOPERS.md")
SCANNED_SUFFIXES = {".py", ".md", ".toml", ".txt", ".cfg", ".ini", ".html", ".j2"}

#: A heading that opens a numbered section: "## 2. Inductive coupling" or
#: "### 2.6 Screening factor of earth wires".
HEADING = re.compile(r"^#{2,4}\s+(\d+(?:\.\d+)*)\.?\s+\S", re.MULTILINE)
#: A citation of the methods document with one or more section numbers, possibly
#: wrapped onto the next line of a comment or docstring:
#: "methods.md §1, §5", "methods.md\n§5", "methods.md §2.6".
CITATION = re.compile(
    r"methods\.md(?P<refs>(?:[\s#:,;*]*(?:and\s+)?§\s*\d+(?:\.\d+)*)+)", re.IGNORECASE)
SECTION_NUMBER = re.compile(r"§\s*(\d+(?:\.\d+)*)")
#: Any mention of a methods document by file name, with the path before it.
ANY_METHODS_FILE = re.compile(r"[\w./\\-]*methods\.md", re.IGNORECASE)


def _doc_text() -> str:
    return DOC.read_text(encoding="utf-8")


def _sections() -> list[str]:
    return HEADING.findall(_doc_text())


def _scanned_files() -> list[Path]:
    files = []
    for name in SCANNED_ROOTS:
        p = ROOT / name
        if p.is_file():
            files.append(p)
        elif p.is_dir():
            files.extend(f for f in sorted(p.rglob("*"))
                         if f.is_file() and f.suffix in SCANNED_SUFFIXES
                         and "__pycache__" not in f.parts
                         and not any(part.startswith(".") for part in f.relative_to(ROOT).parts))
    here = Path(__file__).resolve()
    return [f for f in files if f != DOC and f.resolve() != here]


def _citations() -> list[tuple[str, str]]:
    """(file:line, section number) of every section citation in the scanned files."""
    out = []
    for path in _scanned_files():
        text = path.read_text(encoding="utf-8", errors="replace")
        for match in CITATION.finditer(text):
            line = text.count("\n", 0, match.start()) + 1
            where = f"{path.relative_to(ROOT)}:{line}"
            out.extend((where, n) for n in SECTION_NUMBER.findall(match.group("refs")))
    return out


def test_document_exists_with_numbered_sections():
    sections = _sections()
    top = [s for s in sections if "." not in s]
    # Sections are numbered 1, 2, 3, ... in order, each number used once.
    assert top == [str(i) for i in range(1, len(top) + 1)], top
    assert len(sections) == len(set(sections)), "a section number is used twice"
    # Subsections N.1, N.2, ... follow each other within their section.
    for n in top:
        subs = [s for s in sections if s.startswith(n + ".") and s.count(".") == 1]
        assert subs == [f"{n}.{i}" for i in range(1, len(subs) + 1)], subs


def test_citations_are_found():
    # The scan must see the citations that exist; a regex that matched nothing
    # would let the next test pass vacuously.
    assert len(_citations()) >= 10


def test_every_cited_section_exists():
    sections = set(_sections())
    missing = [f"{where}: §{n}" for where, n in _citations() if n not in sections]
    assert not missing, "cited sections missing from docs/methods.md:\n" + "\n".join(missing)


def test_no_methods_document_outside_docs_is_cited():
    bad = []
    for path in _scanned_files():
        in_docs = path.relative_to(ROOT).parts[0] == "docs"
        text = path.read_text(encoding="utf-8", errors="replace")
        for match in ANY_METHODS_FILE.finditer(text):
            name = match.group(0)
            ok = name == "docs/methods.md" or (in_docs and name == "methods.md")
            if not ok:
                line = text.count("\n", 0, match.start()) + 1
                bad.append(f"{path.relative_to(ROOT)}:{line}: {name}")
    assert not bad, "cite docs/methods.md instead of:\n" + "\n".join(bad)


def test_document_cites_nothing_outside_the_repository():
    text = _doc_text()
    assert "METHODS.md" not in text
    for pattern in (r"\.\./", r"/work/", r"\bshared/", r"file://"):
        assert not re.search(pattern, text), pattern


def test_provenance_marks_are_defined_and_used():
    text = _doc_text()
    for mark in ("from memory", "common practice", "derived", "computed"):
        assert f"*({mark})*" in text, mark
    # Recalled values are the rule for standards' clause numbers: the mark must be
    # used throughout, not once.
    assert text.count("from memory") >= 30


def test_glossary_columns_are_the_code_names():
    # Every output column the glossary names is a name the code writes.
    text = _doc_text()
    glossary = text[text.index("## 14."):text.index("## References")]
    outputs = glossary[glossary.index("**Outputs**"):]
    names = set()
    for row in outputs.splitlines():
        if row.startswith("| `"):
            first_cell = row.split("|")[1]
            names.update(n for n in re.findall(r"`([a-z_0-9<>]+)`", first_cell) if "<" not in n)
    assert len(names) >= 30
    source = "\n".join(p.read_text(encoding="utf-8") for p in (ROOT / "corridor").rglob("*.py"))
    missing = sorted(n for n in names if f'"{n}"' not in source)
    assert not missing, missing


# -- Numbers the document derives, against closed forms evaluated here -------------

@pytest.fixture(autouse=True)
def _precision():
    with mp.workdps(30):
        yield


def _mu0():
    return 4e-7 * mp.pi


_EPS0 = "8.8541878128e-12"


def _in_doc(text: str):
    assert text in _doc_text(), f"docs/methods.md should state {text!r}"


def test_equivalent_depth_constant():
    # De = 2·e^{1/2−γ}/√(ωμ0/ρ) (leading terms of Carson's series, 1926): the
    # constant C of De = C·√(ρ/f) is 2e^{1/2−γ}/√(2πμ0).
    c = 2 * mp.exp(mp.mpf(1) / 2 - mp.euler) / mp.sqrt(2 * mp.pi * _mu0())
    assert float(c) == pytest.approx(658.87, abs=0.005)
    _in_doc("658.87·√(ρ/f)")
    # De in 100 Ω·m soil at 50 Hz and at 60 Hz.
    assert float(c * mp.sqrt(100 / mp.mpf(50))) == pytest.approx(932, abs=0.5)
    assert float(c * mp.sqrt(100 / mp.mpf(60))) == pytest.approx(851, abs=0.5)
    _in_doc("De = 932 m at 50 Hz and 851 m at 60 Hz")


@pytest.mark.parametrize("f_hz, real_ohm_km, coef_ohm_km", [(50, "0.0493", "0.1447"),
                                                            (60, "0.0592", "0.1736")])
def test_low_frequency_coefficients(f_hz, real_ohm_km, coef_ohm_km):
    # ωμ0/8 and (ωμ0/2π)·ln 10 per km: the textbook 50/60 Hz forms (Gönen).
    w = 2 * mp.pi * f_hz
    assert float(w * _mu0() / 8 * 1000) == pytest.approx(float(real_ohm_km), abs=5e-5)
    assert float(w * _mu0() / (2 * mp.pi) * mp.log(10) * 1000) == pytest.approx(
        float(coef_ohm_km), abs=5e-5)
    _in_doc(f"{real_ohm_km} + j{coef_ohm_km}·log10(De/d)")


def test_low_frequency_bound_in_metres():
    # k = D·√(ωμ0/ρ) ≤ 0.056 at 50 Hz, 100 Ω·m: D ≤ 0.056/√(ωμ0/ρ) ≈ 28 m.
    m = mp.sqrt(2 * mp.pi * 50 * _mu0() / 100)
    assert float(mp.mpf("0.056") / m) == pytest.approx(28, abs=0.5)
    _in_doc("k = D·m ≤ 0.056")
    _in_doc("D ≤ 28 m")


def test_earth_skin_depth():
    # √(2ρ/(ωμ0)) in 100 Ω·m soil at 50 Hz.
    assert float(mp.sqrt(2 * 100 / (2 * mp.pi * 50 * _mu0()))) == pytest.approx(712, abs=0.5)
    _in_doc("about 712 m in 100 Ω·m soil at 50 Hz")


def test_pipe_steel_skin_depth():
    # δ = √(2ρ/(ωμ0μr)), ρ = 1.7e-7 Ω·m, μr = 300, 50 Hz (values from memory; the
    # arithmetic is exact).
    delta = mp.sqrt(2 * mp.mpf("1.7e-7") / (2 * mp.pi * 50 * _mu0() * 300))
    assert float(delta) * 1000 == pytest.approx(1.69, abs=0.005)
    _in_doc("δ = 1.69 mm at 50 Hz")
    # |coth(q·t) − 1| falls below 0.1 % at t ≈ 3.8δ (q = (1 + j)/δ).
    assert abs(mp.coth((1 + 1j) * mp.mpf("3.81")) - 1) < 1e-3
    assert abs(mp.coth((1 + 1j) * mp.mpf("3.79")) - 1) > 1e-3
    _in_doc("below 0.1 % from t ≈ 3.8δ")


def test_holiday_diameter_and_current_density():
    # 1 cm² circle: d = √(4A/π); J = I/(πd²/4) with I = V/(ρ/(2d)) gives 8V/(ρπd).
    d = mp.sqrt(4 * mp.mpf("1e-4") / mp.pi)
    assert float(d) * 1000 == pytest.approx(11.28, abs=0.005)
    v, rho = mp.mpf(15), mp.mpf(100)
    assert float((v / (rho / (2 * d))) / (mp.pi * d**2 / 4)) == pytest.approx(
        float(8 * v / (rho * mp.pi * d)), rel=1e-12)
    _in_doc("J = 8·V / (ρ·π·d), d = 11.28 mm")


def test_fence_wire_capacitance():
    # C = 2πε0/ln(2h/r), h = 1 m, r = 1.25 mm.
    c = 2 * mp.pi * mp.mpf(_EPS0) / mp.log(2 * 1 / mp.mpf("0.00125"))
    assert float(c) * 1e12 == pytest.approx(7.5, abs=0.05)
    _in_doc("about 7.5 pF/m")


def test_dwight_forms_agree():
    # The two ways the document writes Dwight's horizontal-wire resistance are the
    # same expression: ρ/(πL)[ln(2L/√(2as)) − 1] = ρ/(2πL)[ln(2L/a) + ln(L/s) − 2].
    rho, length, a, s = mp.mpf(100), mp.mpf(20), mp.mpf("0.005"), mp.mpf("0.8")
    one = rho / (mp.pi * length) * (mp.log(2 * length / mp.sqrt(2 * a * s)) - 1)
    two = rho / (2 * mp.pi * length) * (mp.log(2 * length / a) + mp.log(length / s) - 2)
    assert float(one) == pytest.approx(float(two), rel=1e-15)
    # 10 Ω in 100 Ω·m: the document's "about 15 m" solves the first form.
    length_10 = mp.findroot(
        lambda x: rho / (mp.pi * x) * (mp.log(2 * x / mp.sqrt(2 * a * s)) - 1) - 10, 15)
    assert float(length_10) == pytest.approx(15.4, abs=0.1)
    _in_doc("10 Ω in 100 Ω·m soil needs about 15 m")


def test_ladder_fixed_point():
    # Z∞ = Zs/2 + √(Zs·Rt + Zs²/4) solves Z∞ = Zs + Rt·Z∞/(Rt + Z∞) (infinite ladder).
    zs, rt = mp.mpc(0.4, 0.8), mp.mpf(10)
    zinf = zs / 2 + mp.sqrt(zs * rt + zs**2 / 4)
    assert abs(zinf - (zs + rt * zinf / (rt + zinf))) < 1e-25
    _in_doc("Z∞ = Z_s/2 + √(Z_s·R_t + Z_s²/4)")


def test_fault_fed_from_both_ends_matches_the_documented_form():
    # §8: on a line continuing beyond a uniform exposure [a, b], a fault at x_f fed
    # from both ends gives V(x_f) = [E_A(1 − e^{−γ(x_f−a)}) + E_B(1 − e^{−γ(b−x_f)})]/(2γ),
    # up to twice the one-direction end voltage (E/2γ)(1 − e^{−γL}). Closed form from
    # the Green's function of the matched line; checked on the production chain solver.
    from corridor.network.response import matched_termination_admittance
    from tests.network.chains import solve_chains

    z, y = 0.05e-3 + 0.6e-3j, 1.0 / (5.0 * 1000.0) + 0j  # Ω/m, S/m: a leaky buried conductor
    n_seg, seg_m = 400, 50.0  # a 20 km exposure
    x_f_seg = 160  # fault at 8 km
    e_a, e_b = 1.0, 0.8  # V/m, the two sides' EMF magnitudes
    emf = [e_a * seg_m] * x_f_seg + [-e_b * seg_m] * (n_seg - x_f_seg)
    y_end = complex(matched_termination_admittance(z, y))
    sol = solve_chains([seg_m] * n_seg, z, y, emf, [0],
                       start_termination_admittance_s=y_end, end_termination_admittance_s=y_end)
    gamma = np.sqrt(z * y)
    length = n_seg * seg_m
    x_f = x_f_seg * seg_m
    expected = (e_a * (1 - np.exp(-gamma * x_f))
                + e_b * (1 - np.exp(-gamma * (length - x_f)))) / (2 * gamma)
    assert abs(sol.node_voltage_v[x_f_seg]) == pytest.approx(abs(expected), rel=1e-9)
    # One direction, same EMF magnitude e_a everywhere: the end voltage.
    one_way = solve_chains([seg_m] * n_seg, z, y, [e_a * seg_m] * n_seg, [0],
                           start_termination_admittance_s=y_end,
                           end_termination_admittance_s=y_end)
    end = abs(e_a * (1 - np.exp(-gamma * length)) / (2 * gamma))
    assert np.abs(one_way.node_voltage_v).max() == pytest.approx(end, rel=1e-9)
    assert abs(sol.node_voltage_v[x_f_seg]) > 1.5 * end
    _in_doc("approaches twice the one-direction end voltage")
