"""Plain names, formulas, editions and the to-verify flag of the limit-set criteria.

These are what the report presents (it never hard-codes them). Outside facts
checked: the IEEE Std 80-2013 body-current constants k = 0.116 A·√s (50 kg)
and 0.157 A·√s (70 kg) (clauses 5.3 and 5.4, from memory), and that the
NACE SP0177 values (15 V, 5 mA) are the published ones (NACE RP0177-2000
§5.2.1.1), while every value the shipped files mark "from memory" is flagged
to be verified.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from corridor.limits.limit_sets import (
    COMPUTED_QUANTITIES,
    QUANTITY_TITLES,
    LimitSetError,
    load_limit_set,
)

CONFIG_DIR = Path(__file__).resolve().parents[2] / "corridor" / "data" / "limits"
SHIPPED = ("iec_en", "ieee_na")

#: Keys whose lines hold a limit value or a parameter of one.
VALUE_KEYS = re.compile(r"^\s*(value|table_value|table_duration_s|normal_limit_v|"
                        r"high_reliability_limit_v|high_reliability_max_clearing_s|"
                        r"body_weight_kg|surface_resistivity_ohm_m|surface_thickness_m|"
                        r"bitumen|pe|fbe)\s*=")


def _blocks(name: str) -> dict[str, list[str]]:
    """Lines of each ``[criteria.<name>]`` table (sub-tables included), by criterion."""
    out: dict[str, list[str]] = {}
    current = None
    for line in (CONFIG_DIR / f"{name}.toml").read_text(encoding="utf-8").splitlines():
        m = re.match(r"^\[criteria\.([a-z0-9_]+)", line)
        if m:
            current = m.group(1)
            out.setdefault(current, [])
            continue
        if current is not None:
            out[current].append(line)
    return out


@pytest.mark.parametrize("name", SHIPPED)
def test_every_shipped_criterion_has_a_title_formula_and_edition(name):
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    for c in ls.criteria:
        assert c.title and c.formula and c.edition and c.source, c.name
        text = c.plain_name(0.5)
        assert "{" not in text and "_" not in text, text  # placeholders filled, no ids
        # the edition is one the set names in [meta] editions (or part of one)
        assert any(part.strip() in " ".join(ls.editions) for part in c.edition.split("/")), (
            c.name, c.edition)


@pytest.mark.parametrize("name", SHIPPED)
def test_values_marked_from_memory_are_flagged_to_verify(name):
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    blocks = _blocks(name)
    for c in ls.criteria:
        lines = blocks[c.name]
        marked = False
        for i, line in enumerate(lines):
            if not VALUE_KEYS.match(line):
                continue
            block = [line]
            j = i - 1
            while j >= 0 and lines[j].lstrip().startswith("#"):
                block.append(lines[j])
                j -= 1
            marked |= "from memory" in " ".join(block)
        assert c.to_verify == marked, c.name
        assert "from memory" not in c.source  # the report says it once, in its own words


def test_nace_values_are_published_not_to_verify():
    # NACE RP0177-2000 §5.2.1.1: 15 V and 5 mA (published, carried into SP0177)
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    for name, value in (("steady_state_voltage", 15.0), ("steady_state_current", 5.0)):
        c = ls[name]
        assert not c.to_verify and c.params["value"] == value
        assert "NACE" in c.plain_name() and "NACE" in c.edition


def test_plain_name_fills_parameters_and_clearing_time():
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    touch = ls["touch_fault"]
    assert touch.plain_name(0.5) == "Touch voltage during earth fault (IEEE Std 80, 50 kg, 0.5 s)"
    assert touch.plain_name() == ("Touch voltage during earth fault (IEEE Std 80, 50 kg, at the"
                                  " clearing time)")
    assert touch.uses_clearing_time and not ls["steady_state_voltage"].uses_clearing_time
    heavy = load_limit_set("ieee_na", {"criteria": {"touch_fault": {"body_weight_kg": 70}}},
                           search_dir=CONFIG_DIR)["touch_fault"]
    assert "70 kg" in heavy.plain_name(0.2) and "0.2 s" in heavy.plain_name(0.2)


def test_limit_text_states_the_value_or_formula():
    ls = load_limit_set("ieee_na", search_dir=CONFIG_DIR)
    assert ls["steady_state_voltage"].limit_text("V") == "15 V"
    assert ls["steady_state_current"].limit_text("mA") == "5 mA"
    # IEEE Std 80-2013 clauses 5.3/5.4 (from memory): k = 0.116 (50 kg), 0.157 (70 kg)
    assert "0.116" in ls["touch_fault"].limit_text("V")
    heavy = load_limit_set("ieee_na", {"criteria": {"step_fault": {"body_weight_kg": 70}}},
                           search_dir=CONFIG_DIR)["step_fault"]
    assert "0.157" in heavy.limit_text("V") and "6·Cs·ρs" in heavy.limit_text("V")
    # ITU-T Directives Vol. VI (from memory): 430 V, 650 V on high-reliability lines
    itu = ls["telecom_fault"].limit_text("V")
    assert "430 V" in itu and "650 V" in itu and "0.2 s" in itu
    iec = load_limit_set("iec_en", search_dir=CONFIG_DIR)
    # EN 50522:2010 Table B.3 (from memory): 220 V at 0.5 s
    assert "220 V at 0.5 s" in iec["touch_fault"].limit_text("V")
    assert "pe: 3000 V" in iec["coating_stress"].limit_text("V")


def test_every_computed_quantity_has_a_plain_title():
    assert set(QUANTITY_TITLES) == set(COMPUTED_QUANTITIES)
    for q, title in QUANTITY_TITLES.items():
        assert "_" not in title, q


def test_title_placeholder_must_name_a_parameter(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text('[meta]\nname = "t"\ndescription = "test set"\neditions = ["none"]\n\n'
                    '[criteria.c]\napplies_to = ["pipeline"]\ncase = "fault"\n'
                    'quantity = "v_touch_fault_v"\nmethod = "ieee80_touch"\n'
                    'title = "Touch ({body_mass_kg} kg)"\n', encoding="utf-8")
    with pytest.raises(LimitSetError) as exc:
        load_limit_set(path)
    assert "criteria.c.title" in str(exc.value) and "body_mass_kg" in str(exc.value)
