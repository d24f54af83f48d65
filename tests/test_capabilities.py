"""Asset kinds are treated by their capabilities, never by their names.

A kind a plugin registers with the capabilities of a built-in kind gets the same
treatment in the stages (the former plugin gap: coating stress, AC density,
capacitive pickup and the ITU-T section EMF were tied to the names pipeline,
fence and telecom). Checked against closed forms: the AC density at a 1 cm²
circular holiday, J = 8V/(ρπd) (spread resistance of a surface disc ρ/(2d),
ISO 18086 practice), and the equivalent radius of a pipe, half its diameter.
"""

from __future__ import annotations

import importlib.metadata
import math

import numpy as np
import pandas as pd
import pytest

from corridor.kinds import RadiusFrom
from corridor.registry import ENTRY_POINT_GROUP, load_plugins, registry
from corridor.settings import Spec
from corridor.steps.assess import derived_quantities
from corridor.steps.columns import kinds_with
from corridor.steps.couple import _asset_radius


def _constants(segments):
    n = len(segments)
    return np.full(n, 1e-3 + 1e-3j), np.full(n, 1e-4 + 0j)


def register_coated_main(reg):
    reg.add_asset_kind(
        "coated_main", fields=(Spec("bore_m", "float", low=0.01, high=3.0,
                                    doc="Outer diameter [m]."),),
        defaults={"height_m": -1.0, "termination_resistance_ohm": 10.0, "bore_m": 0.3},
        line_constants=_constants, coated=True, radius=RadiusFrom("bore_m", 0.3, 0.5))


@pytest.fixture
def coated_main():
    registry.unload()
    ep = importlib.metadata.EntryPoint(name="coated", group=ENTRY_POINT_GROUP,
                                       value="tests.test_capabilities:register_coated_main")
    load_plugins([ep])
    yield registry.kind("coated_main")
    registry.unload()


def test_builtin_kinds_declare_the_capabilities_of_their_trade():
    # coating stress and AC corrosion concern coated pipelines; the ITU-T Directives
    # limit the EMF of telecom lines between grounded ends; a fence is carried above
    # ground (common practice)
    assert registry.kind("pipeline").coated and not registry.kind("fence").coated
    assert registry.kind("telecom").section_emf and not registry.kind("rail").section_emf
    assert registry.kind("fence").above_ground and not registry.kind("pipeline").above_ground
    assert registry.kind("telecom").grounding_terminations[0] == "cable_grounding"


def test_plugin_kind_gets_the_treatment_of_its_capabilities(coated_main):
    kinds = np.array(["pipeline", "coated_main", "fence", "telecom"], dtype=object)
    assert kinds_with(kinds, "coated").tolist() == [True, True, False, False]
    assert kinds_with(kinds, "section_emf").tolist() == [False, False, False, True]


def test_plugin_kind_radius_from_its_attribute(coated_main):
    assets = pd.DataFrame({"asset_kind": ["coated_main", "coated_main", "pipeline", "rail"],
                           "bore_m": [0.4, np.nan, np.nan, np.nan],
                           "diameter_m": [np.nan, np.nan, 0.508, np.nan]})
    # half the diameter; a missing one takes the kind's 0.3 m; rail declares none (1 cm)
    np.testing.assert_allclose(_asset_radius(assets), [0.2, 0.15, 0.254, 0.01], rtol=0,
                               atol=0)


def test_ac_density_judged_on_a_coated_plugin_kind(coated_main):
    table = pd.DataFrame({"asset_kind": ["coated_main", "rail"], "v_normal_v": [10.0, 10.0],
                          "soil_resistivity_ohm_m": [100.0, 100.0]})
    d = math.sqrt(4e-4 / math.pi)  # a 1 cm² circular holiday
    j = derived_quantities(table)["ac_density_a_per_m2"]
    assert j[0] == pytest.approx(8 * 10.0 / (100.0 * math.pi * d), rel=1e-3)
    assert math.isnan(j[1])  # not a coated kind: not judged
