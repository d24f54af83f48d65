"""ISO 18086:2019 clause 7 combination (values from memory; docs/methods.md §6.8).

Acceptable when J_ac < 30 A/m², or J_dc < 1 A/m², or J_ac/J_dc < 3: the
alternatives are joined by "or". Missing inputs never pass a pipe.
"""

import numpy as np

from corridor.limits.ac_corrosion import iso18086_utilization


def test_each_alternative_passes_on_its_own():
    j_ac = np.array([20.0, 80.0, 80.0, 80.0, 80.0])
    j_dc = np.array([np.nan, 0.5, 40.0, 10.0, 2.0])
    u = iso18086_utilization(j_ac, j_dc)
    # a) 20 < 30 passes alone, J_dc unknown
    assert u[0] == 20.0 / 30.0
    # b) J_ac 80 but J_dc 0.5 < 1
    assert u[1] == 0.5
    # c) ratio 80/40 = 2 < 3
    assert u[2] == 2.0 / 3.0
    # none holds: J_ac/30 = 2.67, J_dc = 10, ratio 8/3 → fails with the smallest ratio
    assert u[3] == min(80 / 30, 10.0, 8.0 / 3.0)
    assert u[3] > 1.0
    # J_dc 2 A/m²: ratio 40/3 fails, J_dc fails, J_ac fails
    assert u[4] == min(80 / 30, 2.0, 40.0 / 3.0)


def test_missing_dc_density_is_not_assessed_unless_ac_alone_passes():
    u = iso18086_utilization([29.0, 30.0, 200.0, np.nan], [np.nan, np.nan, 0.0, 1.0])
    assert u[0] < 1.0
    assert np.isnan(u[1])  # J_ac at its limit: only J_dc could still pass the pipe
    assert np.isnan(u[2])  # J_dc of 0: no value, the ratio is undefined
    assert np.isnan(u[3])  # J_ac unknown


def test_limits_are_parameters():
    # CEN/TS 15280:2006 ratio limit 5 (from memory) instead of 3
    assert iso18086_utilization(80.0, 20.0, ratio_limit=5.0) == min(80 / 30, 20.0, 4.0 / 5.0)
