"""Checks of the limit-set files, their loader and the evaluation of criteria."""

import dataclasses
import math
import re
import shutil
from pathlib import Path
from types import MappingProxyType

import numpy as np
import pytest

from corridor.limits.evaluate import evaluate
from corridor.limits.limit_sets import (
    DEFAULT_SEARCH_DIR,
    LimitSetError,
    available_limit_sets,
    load_limit_set,
)

CONFIG_DIR = Path(__file__).resolve().parents[2] / "corridor" / "data" / "limits"
SHIPPED = ("iec_en", "ieee_na")

# Words that name a source or mark the provenance of a value (project rule).
PROVENANCE = re.compile(r"EN 50|IEC|IEEE|ITU|ISO|NACE|NESC|common practice|from memory|"
                        r"published")

MINIMAL = """\
[meta]
name = "t"
description = "test set"
editions = ["none"]

[criteria.c]
applies_to = ["pipeline"]
case = "normal"
quantity = "v_normal_v"
method = "constant"
value = 60.0
"""


def _write(tmp_path, text, name="bad.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _eval(ls, kind, quantities, clearing_s=0.5, rho=100.0, high_rel=False, **kw):
    kind = np.asarray(kind)
    return evaluate(ls, kind, quantities, np.broadcast_to(clearing_s, kind.shape),
                    np.broadcast_to(rho, kind.shape), np.broadcast_to(high_rel, kind.shape),
                    **kw)


# ------------------------------------------------------------ shipped sets

@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_sets_load(name):
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    assert ls.name == name
    assert ls.editions and ls.criteria
    assert ls.review_threshold == 0.5  # common practice, as documented in the files
    # Each set covers every asset kind with at least one criterion.
    kinds = {k for c in ls.criteria for k in c.applies_to}
    assert kinds == {"pipeline", "fence", "rail", "telecom"}


def test_default_search_dir_is_the_packaged_data():
    assert DEFAULT_SEARCH_DIR == CONFIG_DIR
    assert set(SHIPPED) <= set(available_limit_sets())
    assert load_limit_set("iec_en") == load_limit_set("iec_en", search_dir=CONFIG_DIR)


@pytest.mark.parametrize("name", SHIPPED)
def test_every_value_in_shipped_sets_names_its_source(name):
    # Project rule: beside every value (same line, or the comment block right
    # above it) a source, "common practice" or "from memory".
    lines = (CONFIG_DIR / f"{name}.toml").read_text(encoding="utf-8").splitlines()
    # Numbers, lists of numbers and booleans are values; names and text are not.
    value_line = re.compile(r"^\s*[a-z_]+\s*=\s*(-?[\d.]|\[\s*-?[\d.]|true|false)")
    missing = []
    for i, line in enumerate(lines):
        if not value_line.match(line):
            continue
        block = [line]
        j = i - 1
        while j >= 0 and lines[j].lstrip().startswith("#"):
            block.append(lines[j])
            j -= 1
        if not PROVENANCE.search(" ".join(block)):
            missing.append(f"{name}.toml:{i + 1}: {line.strip()}")
    assert not missing, "values without a source:\n" + "\n".join(missing)


def test_iec_en_touch_fault_reproduces_en50522_table():
    # EN 50522:2010 Table B.3 (from memory): U_Tp at the table's durations.
    ls = load_limit_set("iec_en", search_dir=CONFIG_DIR)
    t = np.array([0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0])
    u_tp = np.array([716.0, 654.0, 537.0, 220.0, 117.0, 96.0, 86.0, 85.0])
    out = evaluate(ls, np.full(t.size, "fence"), {"v_touch_fault_v": u_tp}, t,
                   np.full(t.size, 100.0), np.zeros(t.size, bool))
    np.testing.assert_allclose(out["permitted"]["touch_fault"], u_tp, rtol=1e-12)  # round trip
    np.testing.assert_allclose(out["ratios"]["touch_fault"], 1.0, rtol=1e-12)
    assert set(out["hazard_class"]) == {"exceeds"}  # u >= 1 exceeds


def test_iec_en_rail_and_long_term_values():
    ls = load_limit_set("iec_en", search_dir=CONFIG_DIR)
    out = _eval(ls, ["rail", "rail", "pipeline", "telecom"],
                {"v_touch_fault_v": np.array([785.0, np.nan, np.nan, np.nan]),
                 "v_normal_v": np.array([np.nan, 30.0, 30.0, np.nan]),
                 "emf_section_normal_v": np.array([np.nan, np.nan, np.nan, 30.0])},
                clearing_s=0.1)
    # EN 50122-1:2011 Table 4 (from memory): 785 V at 0.1 s; 60 V beyond 300 s.
    assert out["permitted"]["rail_touch_fault"][0] == pytest.approx(785.0, rel=1e-12)
    assert out["permitted"]["rail_long_term"][1] == 60.0
    # EN 50443:2011 (from memory): 60 V long-term on pipelines.
    assert out["permitted"]["long_term_voltage"][2] == 60.0
    # ITU-T Directives (from memory): 60 V long-term on telecom lines.
    assert out["ratios"]["telecom_long_term"][3] == pytest.approx(0.5, rel=1e-12)
    # Pipeline at 30 V: ISO 18086 (15 V, from memory) governs over EN 50443 (60 V).
    assert out["governing"][2] == "ac_corrosion_voltage:normal"
    assert out["utilization"][2] == pytest.approx(2.0, rel=1e-12)


def test_iec_en_coating_stress_by_coating_type():
    # EN 50443:2011 (from memory): bitumen 1-2 kV, PE 3-5 kV; the set takes the
    # lower ends. FBE and unknown coatings take the strictest value.
    ls = load_limit_set("iec_en", search_dir=CONFIG_DIR)
    kinds = np.full(4, "pipeline")
    q = {"v_coating_stress_v": np.full(4, 1500.0)}
    out = _eval(ls, kinds, q, categories={"coating_type": ["pe", "bitumen", "fbe", "other"]})
    np.testing.assert_array_equal(out["permitted"]["coating_stress"],
                                  [3000.0, 1000.0, 1000.0, 1000.0])
    # No coating labels at all: the strictest value everywhere.
    out = _eval(ls, kinds, q)
    np.testing.assert_array_equal(out["permitted"]["coating_stress"], 1000.0)


@pytest.mark.parametrize("duration_s", [0.5, 1.0, 3.0])
def test_ieee_na_touch_fault_is_ieee80_without_surface_layer(duration_s):
    # IEEE Std 80-2013 (from memory), hand formula; the set's default is 50 kg
    # on native soil: rho_s = soil rho, Cs = 1.
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    rho = np.array([30.0, 100.0, 1000.0])
    out = evaluate(ls, np.full(3, "fence"), {"v_touch_fault_v": np.full(3, 100.0)},
                   np.full(3, duration_s), rho, np.zeros(3, bool))
    want = (1000 + 1.5 * rho) * 0.116 / math.sqrt(duration_s)
    np.testing.assert_allclose(out["permitted"]["touch_fault"], want, rtol=1e-12)  # rounding
    want_step = (1000 + 6 * rho) * 0.116 / math.sqrt(duration_s)
    np.testing.assert_allclose(out["permitted"]["step_fault"], want_step, rtol=1e-12)


def test_ieee_na_override_reproduces_ieee80_annex_b_example():
    # IEEE Std 80-2013 Annex B, example 1 (from memory): 70 kg, t = 0.5 s,
    # rho = 400, rho_s = 2500, h_s = 0.102 m: Cs = 0.74 and E_touch70 = 838.2 V.
    # The example rounds Cs to 0.74; with the unrounded Cs = 0.7429 the formula
    # gives 840.6 V, so rtol 5e-3 covers the example's rounding.
    over = {"criteria": {"touch_fault": {"body_weight_kg": 70, "surface_layer": True,
                                         "surface_resistivity_ohm_m": 2500.0,
                                         "surface_thickness_m": 0.102}}}
    ls = load_limit_set("ieee_na", over, search_dir=CONFIG_DIR)
    out = _eval(ls, ["fence"], {"v_touch_fault_v": np.array([500.0])}, clearing_s=0.5, rho=400.0)
    assert out["permitted"]["touch_fault"][0] == pytest.approx(838.2, rel=5e-3)
    assert ls["touch_fault"].params["body_weight_kg"] == 70
    # The override touched only that criterion.
    assert ls["step_fault"].params["body_weight_kg"] == 50


def test_ieee_na_nace_pipeline_shock_criteria():
    # NACE RP0177-2000 §5.2.1.1 (published): 15 V open-circuit or 5 mA available
    # is a shock hazard -- either one suffices.
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    out = _eval(ls, ["pipeline"] * 3,
                {"v_normal_v": np.array([14.0, 15.0, 1.0]),
                 "i_normal_body_ma": np.array([1.0, 1.0, 5.0])})
    assert list(out["hazard_class"]) == ["review", "exceeds", "exceeds"]
    assert out["governing"][1] in ("steady_state_voltage:normal", "ac_corrosion_voltage:normal")
    assert out["governing"][2] == "steady_state_current:normal"


@pytest.mark.parametrize("name", SHIPPED)
def test_capacitive_criterion_judges_available_current(name):
    # NESC Rule 232 practice / IEC 60479-1 let-go (from memory): 5 mA available.
    # docs/methods.md §3 (common practice): a high open-circuit voltage behind
    # microamps is a nuisance, not a hazard. The open-circuit voltage is passed
    # too and must not decide.
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    out = _eval(ls, ["fence", "fence"],
                {"v_capacitive_open_v": np.array([5000.0, 5000.0]),
                 "i_capacitive_body_ma": np.array([0.05, 10.0])})
    np.testing.assert_allclose(out["ratios"]["capacitive_current"], [0.01, 2.0], rtol=1e-12)
    assert list(out["hazard_class"]) == ["clear", "exceeds"]
    assert list(out["governing"]) == ["capacitive_current:capacitive"] * 2


@pytest.mark.parametrize("name", SHIPPED)
def test_iso18086_thresholds(name):
    # ISO 18086:2019 (from memory): 15 V (clause 6 in the files); clause 7: J_ac < 30 A/m2, or
    # J_dc < 1 A/m2, or J_ac/J_dc < 3, joined by "or" (corridor.limits.ac_corrosion).
    from corridor.limits.ac_corrosion import iso18086_utilization

    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    assert ls["ac_corrosion_voltage"].params["value"] == 15.0
    assert ls["ac_corrosion_density"].params["value"] == 1.0
    assert ls["ac_corrosion_ratio"].params["value"] == 1.0
    assert ls["ac_corrosion_ratio"].needs == ("dc_current_density_a_per_m2",)
    j_ac = np.array([29.0, 30.0, 80.0, 80.0])
    j_dc = np.array([np.nan, np.nan, 40.0, 10.0])
    strict = iso18086_utilization(j_ac, j_dc)
    fallback = np.where(np.isnan(strict), j_ac / 30.0, strict)
    out = _eval(ls, ["pipeline"] * 4, {"iso18086_density_ratio": fallback,
                                       "iso18086_density_ratio_with_dc": strict})
    # 29 A/m2 passes alone; 30 A/m2 without J_dc exceeds (the alternatives cannot be
    # credited); 80 A/m2 with J_ac/J_dc = 2 passes by the ratio; with 8 it exceeds
    assert list(out["hazard_class"]) == ["review", "exceeds", "review", "exceeds"]
    assert np.isnan(out["ratios"]["ac_corrosion_ratio"][1])
    # The 10 V variant is an override away.
    ls10 = load_limit_set(name, {"criteria": {"ac_corrosion_voltage": {"value": 10.0}}},
                          search_dir=CONFIG_DIR)
    assert ls10["ac_corrosion_voltage"].params["value"] == 10.0


@pytest.mark.parametrize("name", SHIPPED)
@pytest.mark.parametrize("clearing_s, expected_v", [(0.1, 650.0), (0.2, 650.0), (0.3, 430.0)])
def test_telecom_fault_itu_logic(name, clearing_s, expected_v):
    # ITU-T Directives (from memory): 650 V on high-reliability lines cleared
    # within 0.2 s, else 430 V; an ordinary line is 430 V regardless.
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    kind = np.array(["telecom", "telecom"])
    out = evaluate(ls, kind, {"emf_section_fault_v": np.array([500.0, 500.0])},
                   np.array([clearing_s] * 2), np.array([100.0] * 2), np.array([True, False]))
    np.testing.assert_array_equal(out["permitted"]["telecom_fault"], [expected_v, 430.0])
    assert out["governing"][0] == "telecom_fault:fault"


# ------------------------------------------------------------- evaluation

def test_not_applicable_or_missing_is_nan_and_nothing_is_clear(tmp_path):
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"))
    out = _eval(ls, ["pipeline", "telecom", "pipeline"],
                {"v_normal_v": np.array([30.0, 30.0, np.nan])})
    r = out["ratios"]["c"]
    assert r[0] == pytest.approx(0.5, rel=1e-12)
    assert np.isnan(r[1]) and np.isnan(r[2])
    assert np.isnan(out["permitted"]["c"][1])
    # what no criterion judged is not assessed: no utilization, never "clear"
    np.testing.assert_allclose(out["utilization"], [0.5, np.nan, np.nan], rtol=1e-12)
    assert list(out["governing"]) == ["c:normal", "", ""]
    assert list(out["hazard_class"]) == ["review", "not assessed", "not assessed"]
    # A quantity nobody computed: nothing assessed.
    out = _eval(ls, ["pipeline"], {})
    assert np.isnan(out["ratios"]["c"][0]) and np.isnan(out["utilization"][0])
    assert out["hazard_class"][0] == "not assessed"


def test_hazard_class_boundaries(tmp_path):
    # Review threshold 0.5 (common practice, the shipped default): below it
    # "clear", from it "review", from 1 "exceeds".
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"))
    v = 60.0 * np.array([0.0, 0.49, 0.5, 0.99, 1.0, 3.0])
    out = _eval(ls, ["pipeline"] * v.size, {"v_normal_v": v})
    assert list(out["hazard_class"]) == ["clear", "clear", "review", "review",
                                         "exceeds", "exceeds"]
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"),
                        {"settings": {"review_threshold": 0.8}})
    out = _eval(ls, ["pipeline"] * v.size, {"v_normal_v": v})
    assert list(out["hazard_class"]) == ["clear", "clear", "clear", "review",
                                         "exceeds", "exceeds"]


def test_complex_phasors_judged_by_magnitude(tmp_path):
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"))
    out = _eval(ls, ["pipeline"], {"v_normal_v": np.array([36.0 + 48.0j])})  # |z| = 60
    assert out["ratios"]["c"][0] == pytest.approx(1.0, rel=1e-12)


def test_nan_clearing_time_leaves_fault_criteria_unassessed_without_warnings():
    # pytest runs with filterwarnings=error, so any RuntimeWarning fails here.
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    out = evaluate(ls, np.array(["fence", "fence"]), {"v_touch_fault_v": np.array([50.0, 50.0])},
                   np.array([np.nan, np.inf]), np.array([100.0, np.nan]), np.zeros(2, bool))
    assert np.isnan(out["ratios"]["touch_fault"]).all()
    assert list(out["governing"]) == ["", ""]


def test_evaluate_rejects_wrong_lengths(tmp_path):
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"))
    with pytest.raises(ValueError, match="one per segment"):
        evaluate(ls, np.array(["pipeline"] * 3), {"v_normal_v": np.ones(2)},
                 np.ones(3), np.ones(3), np.zeros(3, bool))


def test_limit_set_is_immutable(tmp_path):
    ls = load_limit_set(_write(tmp_path, MINIMAL, "m.toml"))
    with pytest.raises(dataclasses.FrozenInstanceError):
        ls.review_threshold = 0.9
    with pytest.raises(dataclasses.FrozenInstanceError):
        ls.criteria[0].quantity = "x"
    p = ls["c"].params
    p["value"] = 1.0
    assert ls["c"].params["value"] == 60.0
    hash(ls)  # hashable: nothing mutable inside


# --------------------------------------------------------- loader errors

def test_named_set_found_in_search_dir(tmp_path):
    shutil.copy(CONFIG_DIR / "iec_en.toml", tmp_path / "mine.toml")
    ls = load_limit_set("mine", search_dir=tmp_path)
    assert ls.name == "iec_en" and ls.source_path == str(tmp_path / "mine.toml")


def test_missing_named_set(tmp_path):
    with pytest.raises(LimitSetError, match=r"nope\.toml.*no limit set named 'nope'.*iec_en"):
        load_limit_set("nope", search_dir=CONFIG_DIR)
    with pytest.raises(LimitSetError, match="not found"):
        load_limit_set(tmp_path / "absent.toml")


def test_toml_syntax_error_names_file(tmp_path):
    path = _write(tmp_path, "[meta\nname = 1\n")
    with pytest.raises(LimitSetError, match=re.escape(str(path)) + ": invalid TOML"):
        load_limit_set(path)


@pytest.mark.parametrize("old, new, key, what", [
    ('value = 60.0', 'value = 60.0\nvalu = 3', "criteria.c.valu", "unknown key"),
    ('value = 60.0', 'value = "60"', "criteria.c.value", "positive number"),
    ('value = 60.0', 'value = -1.0', "criteria.c.value", "positive number"),
    ('value = 60.0\n', '', "criteria.c.value", "missing required key"),
    ('case = "normal"', 'case = "sometimes"', "criteria.c.case", "expected one of"),
    ('method = "constant"', 'method = "magic"', "criteria.c.method", "expected one of"),
    ('applies_to = ["pipeline"]', 'applies_to = ["boat"]', "criteria.c.applies_to",
     "non-empty list"),
    ('quantity = "v_normal_v"', 'quantity = 3', "criteria.c.quantity", "lower-case name"),
    ('editions = ["none"]', 'editions = "none"', "meta.editions", "list of strings"),
    ('[meta]', '[settings]\nreview_threshold = 1.5\n\n[meta]', "settings.review_threshold",
     "between 0 and 1"),
    ('[meta]', 'colour = "red"\n[meta]', "colour", "unknown key"),
])
def test_bad_key_names_file_and_key(tmp_path, old, new, key, what):
    path = _write(tmp_path, MINIMAL.replace(old, new, 1))
    with pytest.raises(LimitSetError) as info:
        load_limit_set(path)
    msg = str(info.value)
    assert f"{path}: {key}: " in msg and what in msg, msg


def test_table_problems(tmp_path):
    text = MINIMAL.replace('method = "constant"\nvalue = 60.0',
                           'method = "table_vs_time"\ntable_duration_s = [0.1, 0.2]\n'
                           'table_value = [100.0]')
    with pytest.raises(LimitSetError, match=r"criteria\.c\.table_value: has 1 values for 2"):
        load_limit_set(_write(tmp_path, text))
    text = MINIMAL.replace('method = "constant"\nvalue = 60.0',
                           'method = "table_vs_time"\ntable_duration_s = [0.2, 0.1]\n'
                           'table_value = [100.0, 50.0]')
    with pytest.raises(LimitSetError, match=r"criteria\.c\.table_duration_s: durations must"):
        load_limit_set(_write(tmp_path, text))


def test_all_problems_reported_at_once(tmp_path):
    text = MINIMAL.replace('value = 60.0', 'value = "x"\nbogus = 1').replace(
        'description = "test set"\n', '')
    with pytest.raises(LimitSetError) as info:
        load_limit_set(_write(tmp_path, text))
    keys = [p.split(": ")[1] for p in info.value.problems]
    assert sorted(keys) == ["criteria.c.bogus", "criteria.c.value", "meta.description"]
    assert isinstance(info.value, ValueError)


def test_bad_overrides_are_named_as_overrides(tmp_path):
    path = _write(tmp_path, MINIMAL, "m.toml")
    with pytest.raises(LimitSetError) as info:
        load_limit_set(path, {"criteria": {"c": {"value": 0.0, "colour": "red"}}})
    msg = str(info.value)
    assert f"overrides to {path}: criteria.c.value: " in msg
    assert f"overrides to {path}: criteria.c.colour: unknown key" in msg
    with pytest.raises(LimitSetError, match="body_weight_kg: expected 50 or 70"):
        load_limit_set("ieee_na", {"criteria": {"touch_fault": {"body_weight_kg": 60}}},
                       search_dir=CONFIG_DIR)


def test_overrides_deep_merge_and_do_not_touch_the_file(tmp_path):
    path = _write(tmp_path, MINIMAL, "m.toml")
    over = {"criteria": {"c": {"value": 15.0},
                         "d": {"applies_to": ["fence"], "case": "capacitive",
                               "quantity": "i_capacitive_short_ma", "method": "constant",
                               "value": 5.0}}}
    ls = load_limit_set(path, over)
    assert ls.names == ("c", "d")
    assert ls["c"].params["value"] == 15.0 and ls["c"].quantity == "v_normal_v"
    assert load_limit_set(path)["c"].params["value"] == 60.0
    assert path.read_text(encoding="utf-8") == MINIMAL


def test_overrides_accept_read_only_mappings(tmp_path):
    # The run config hands its [limits] table over as a read-only mapping.
    path = _write(tmp_path, MINIMAL, "m.toml")
    ls = load_limit_set(path, MappingProxyType({"criteria": {"c": {"value": 30.0}}}))
    assert ls["c"].params["value"] == 30.0


def test_applies_to_is_checked_against_the_kinds_the_caller_names(tmp_path):
    # a plugin's limit set names its own kind; a run passes the registered kinds
    path = _write(tmp_path, MINIMAL.replace('["pipeline"]', '["water_main"]'))
    with pytest.raises(LimitSetError, match="drawn from"):
        load_limit_set(path)  # the built-in kinds only
    ls = load_limit_set(path, asset_kinds=("pipeline", "water_main"))
    assert ls["c"].applies_to == ("water_main",)
    r = _eval(ls, ["water_main", "pipeline"], {"v_normal_v": [30.0, 30.0]})
    # 30 V against the constant 60 V: ratio 0.5 on the kind it applies to only
    assert r["ratios"]["c"][0] == 0.5 and np.isnan(r["ratios"]["c"][1])
