"""Telecom EMF scaling by the cable sheath (docs/methods.md §10; ITU-T K.14).

An isolated sheath, or one grounded at one end only, carries no current and screens
nothing: the factor is 1 whatever screening_factor says (issue 15). With a sheath
resistance the factor is computed, k = (R_s·L + 2R_e)/(Z_s·L + 2R_e) (derived).
"""

import geopandas as gpd
import numpy as np
from shapely.geometry import LineString

from corridor.kinds import _telecom_constants
from corridor.network import asset_models as am
from corridor.registry import KindSegments


def _segments(rows):
    assets = gpd.GeoDataFrame(rows, geometry=[LineString([(0, 0), (5000, 0)])] * len(rows[
        "asset_kind"]), crs="EPSG:32633")
    n = len(assets)
    return KindSegments(kind="telecom", frequency_hz=50.0,
                        soil_resistivity_ohm_m=np.full(n, 100.0), height_m=np.full(n, -0.8),
                        assets=assets, feature=np.arange(n))


def test_isolated_sheath_screens_nothing_and_a_given_resistance_is_used():
    s = _segments({"asset_kind": ["telecom"] * 4,
                   "cable_grounding": ["both_ends", "isolated", "one_end", "both_ends"],
                   "screening_factor": [0.8, 0.8, 0.8, 0.8],
                   "sheath_resistance_ohm_per_km": [np.nan, np.nan, np.nan, 1.0],
                   "termination_resistance_ohm": [10.0] * 4})
    _z, _y, k = _telecom_constants(s)
    assert k[0] == 0.8  # input used where nothing better is known
    assert k[1] == 1.0 and k[2] == 1.0
    expected = am._sheath_screening_factor(1e-3, 0.01, -0.8, 100.0, 50.0, "both_ends", 5000.0,
                                           10.0)
    assert k[3] == expected
    assert 0.5 < k[3] < 1.0
