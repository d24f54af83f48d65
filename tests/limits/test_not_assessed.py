"""Criteria on quantities no stage computes: an error unless declared, then "not assessed".

A screen must never pass what it did not judge (project rule: where the tool
cannot assess something it says so loudly). ISO 18086:2019 clause 6 judges
J_ac/J_dc, which needs the DC (cathodic protection) current density at a
holiday, a measured value (from memory); IEEE Std 80-2013 clause 8.3 judges
the step voltage, the earth-surface potential over one pace, which needs the
ground electrodes' geometry (from memory). Neither is in corridor's layers.
"""

from pathlib import Path

import numpy as np
import pytest

from corridor.limits.evaluate import evaluate, not_assessed
from corridor.limits.limit_sets import (
    COMPUTED_QUANTITIES,
    LimitSetError,
    load_limit_set,
)
from corridor.steps.assess import DERIVED, QUANTITIES

CONFIG_DIR = Path(__file__).resolve().parents[2] / "corridor" / "data" / "limits"

SET = """\
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

[criteria.ratio]
applies_to = ["pipeline"]
case = "normal"
quantity = "ac_dc_density_ratio"
method = "constant"
value = 3.0
{needs}
"""


def _load(tmp_path, needs: str):
    path = tmp_path / "t.toml"
    path.write_text(SET.format(needs=needs), encoding="utf-8")
    return load_limit_set(path)


def test_uncomputed_quantity_without_needs_is_an_error(tmp_path):
    with pytest.raises(LimitSetError) as err:
        _load(tmp_path, "")
    text = "\n".join(err.value.problems)
    assert "criteria.ratio.quantity" in text
    assert "no stage computes 'ac_dc_density_ratio'" in text
    assert "needs = [" in text  # tells how to declare it


def test_declared_needs_load(tmp_path):
    ls = _load(tmp_path, 'needs = ["dc_current_density_a_per_m2"]')
    assert ls["ratio"].needs == ("dc_current_density_a_per_m2",)
    assert not ls["ratio"].computed and ls["c"].computed and ls["c"].needs == ()


@pytest.mark.parametrize("bad", ['needs = []', 'needs = "x"', 'needs = ["Bad Name"]'])
def test_needs_must_be_a_list_of_names(tmp_path, bad):
    with pytest.raises(LimitSetError, match="criteria.ratio.needs"):
        _load(tmp_path, bad)


@pytest.mark.parametrize("name,criterion,needs", [
    ("ieee_na", "ac_corrosion_ratio", "dc_current_density_a_per_m2"),
    ("iec_en", "ac_corrosion_ratio", "dc_current_density_a_per_m2"),
])
def test_shipped_sets_declare_what_the_uncomputed_criteria_need(name, criterion, needs):
    ls = load_limit_set(name, search_dir=CONFIG_DIR)
    assert needs in ls[criterion].needs
    # every other criterion judges a quantity the assess stage hands over
    for c in ls.criteria:
        assert c.computed or c.needs, c.name
    handed = set(QUANTITIES) | set(DERIVED)
    assert handed == set(COMPUTED_QUANTITIES)
    # the step voltage beside a faulted tower is computed (docs/methods.md §4.6)
    assert load_limit_set("ieee_na", search_dir=CONFIG_DIR)["step_fault"].computed


def test_not_assessed_lists_unjudged_criteria_only(tmp_path):
    ls = _load(tmp_path, 'needs = ["dc_current_density_a_per_m2"]')
    kind = np.array(["pipeline", "pipeline", "fence"])
    out = evaluate(ls, kind, {"v_normal_v": np.array([30.0, 90.0, 5.0])},
                   np.full(3, 0.5), np.full(3, 100.0), np.zeros(3, bool))
    rows = not_assessed(ls, kind, out["ratios"])
    assert [r["criterion"] for r in rows] == ["ratio"]
    assert rows[0]["label"] == "ratio:normal" and rows[0]["segments"] == 2
    assert "dc_current_density_a_per_m2" in rows[0]["reason"]
    # the segment is classed by what was judged; the unjudged criterion is in the list
    assert list(out["hazard_class"][:2]) == ["review", "exceeds"]
    # a computed quantity empty on every segment it applies to is not assessed either
    out = evaluate(ls, kind, {"v_normal_v": np.array([np.nan, np.nan, 5.0])},
                   np.full(3, 0.5), np.full(3, 100.0), np.zeros(3, bool))
    rows = not_assessed(ls, kind, out["ratios"])
    assert [r["criterion"] for r in rows] == ["c", "ratio"]
    assert "v_normal_v is empty on every pipeline segment" in rows[0]["reason"]
    # no pipeline in the run: nothing to judge, nothing listed
    assert not_assessed(ls, np.array(["fence"]), {}) == []
