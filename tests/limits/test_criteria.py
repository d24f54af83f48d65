"""Checks of corridor.limits.criteria against the published formulas and tables."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from corridor.limits import criteria as crit

# EN 50522:2010 Table B.3 / Figure 4, permissible touch voltage U_Tp vs fault
# duration (derived from IEC 60479-1:2005 curve c2) -- from memory.
EN50522_DURATION_S = [0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0]
EN50522_U_TP_V = [716.0, 654.0, 537.0, 220.0, 117.0, 96.0, 86.0, 85.0]


# ---------------------------------------------------------------- IEEE Std 80

@pytest.mark.parametrize("duration_s", [0.5, 1.0, 3.0])
@pytest.mark.parametrize("weight_kg, k", [(50, 0.116), (70, 0.157)])
def test_ieee80_body_current_formula(duration_s, weight_kg, k):
    # IEEE Std 80-2013 clauses 5.3/5.4 (from memory): I_B = k/sqrt(t),
    # k = 0.116 (50 kg), 0.157 (70 kg), valid 0.03-3 s. Evaluated by hand here.
    expected = k / math.sqrt(duration_s)
    # rtol: same arithmetic, only rounding differs.
    assert crit.ieee80_body_current_a(duration_s, weight_kg) == pytest.approx(expected, rel=1e-12)


def test_ieee80_body_current_published_constants_at_one_second():
    # IEEE Std 80-2013 (from memory): at 1 s the tolerable current equals k,
    # 116 mA for 50 kg and 157 mA for 70 kg (Dalziel's figures).
    assert crit.ieee80_body_current_a(1.0, 50) == pytest.approx(0.116, rel=1e-12)
    assert crit.ieee80_body_current_a(1.0, 70) == pytest.approx(0.157, rel=1e-12)


def test_ieee80_body_current_outside_validity_range_is_conservative():
    # IEEE Std 80-2013 clause 5.3 (from memory): formula stated for 0.03-3 s.
    i_at_lower_bound = 0.116 / math.sqrt(0.03)
    short = crit.ieee80_body_current_a([0.001, 0.01, 0.0, -1.0], 50)
    # Below 0.03 s the duration is raised to 0.03 s: never more current than at 0.03 s.
    np.testing.assert_allclose(short, i_at_lower_bound, rtol=1e-12)  # rounding only
    # Above 3 s the formula keeps falling (extrapolated), so it never permits
    # more than the 3 s value.
    long = crit.ieee80_body_current_a(np.array([3.0, 5.0, 10.0]), 50)
    np.testing.assert_allclose(long, 0.116 / np.sqrt([3.0, 5.0, 10.0]), rtol=1e-12)
    assert np.all(np.diff(long) < 0)
    assert np.isnan(crit.ieee80_body_current_a(np.nan, 50))


@pytest.mark.parametrize("weight", [60, 50.5, "50", None])
def test_ieee80_body_weight_must_be_50_or_70(weight):
    # IEEE Std 80-2013 (from memory) defines only the 50 kg and 70 kg criteria.
    with pytest.raises(ValueError, match="50 or 70"):
        crit.ieee80_body_current_a(1.0, weight)


def test_surface_layer_derating_ieee80_annex_b_example():
    # IEEE Std 80-2013 Annex B, example 1 (from memory): rho = 400 ohm.m,
    # rho_s = 2500 ohm.m, h_s = 0.102 m -> Cs = 0.74. The formula gives 0.7429;
    # atol: the example rounds Cs to two decimals.
    cs = crit.surface_layer_derating(400.0, 2500.0, 0.102)
    assert cs == pytest.approx(0.74, abs=0.005)
    # Evaluated by hand: 1 - 0.09*(1 - 400/2500)/(2*0.102 + 0.09)
    assert cs == pytest.approx(1 - 0.09 * 0.84 / 0.294, rel=1e-12)


def test_surface_layer_derating_limits():
    # Closed-form limits of IEEE Std 80-2013 clause 7.4's formula (from memory):
    # same resistivity -> no derating (Cs = 1); zero thickness -> rho/rho_s
    # (the person effectively stands on the native soil).
    np.testing.assert_allclose(crit.surface_layer_derating(300.0, 300.0, [0.0, 0.1, 1.0]),
                               1.0, rtol=1e-12)  # rounding only
    np.testing.assert_allclose(crit.surface_layer_derating(100.0, 3000.0, 0.0),
                               100.0 / 3000.0, rtol=1e-12)  # rounding only
    # A thicker high-resistivity layer derates less (Cs rises towards 1).
    cs = crit.surface_layer_derating(100.0, 3000.0, np.array([0.05, 0.1, 0.2, 0.5]))
    assert np.all(np.diff(cs) > 0) and np.all(cs < 1)


def test_touch_and_step_ieee80_annex_b_example_70kg():
    # IEEE Std 80-2013 Annex B, example 1 (from memory): t_s = 0.5 s,
    # rho_s = 2500 ohm.m, Cs = 0.74, 70 kg body: E_touch70 = 838.2 V,
    # E_step70 = 2686.6 V. (These are the 70 kg figures; the 50 kg ones follow
    # from the formula: 619.3 V and 1981.6 V.)
    # rtol: the example quotes four to five significant figures.
    assert crit.ieee80_touch_voltage_v(0.5, 70, 2500.0, 0.74) == pytest.approx(838.2, rel=1e-4)
    assert crit.ieee80_step_voltage_v(0.5, 70, 2500.0, 0.74) == pytest.approx(2686.6, rel=1e-4)
    # 50 kg, evaluated by hand from E = (1000 + 1.5*Cs*rho_s)*0.116/sqrt(t).
    touch50 = (1000 + 1.5 * 0.74 * 2500) * 0.116 / math.sqrt(0.5)
    step50 = (1000 + 6 * 0.74 * 2500) * 0.116 / math.sqrt(0.5)
    assert crit.ieee80_touch_voltage_v(0.5, 50, 2500.0, 0.74) == pytest.approx(touch50, rel=1e-12)
    assert crit.ieee80_step_voltage_v(0.5, 50, 2500.0, 0.74) == pytest.approx(step50, rel=1e-12)


@pytest.mark.parametrize("duration_s", [0.5, 1.0, 3.0])
def test_touch_voltage_with_and_without_surface_layer(duration_s):
    # IEEE Std 80-2013 clause 8.3 (from memory), evaluated by hand.
    rho = 100.0
    # No surface layer: rho_s = rho, Cs = 1.
    bare = (1000 + 1.5 * rho) * 0.116 / math.sqrt(duration_s)
    assert crit.ieee80_touch_voltage_v(duration_s, 50, rho, 1.0) == pytest.approx(bare, rel=1e-12)
    # Crushed rock 3000 ohm.m, 0.1 m (common practice values).
    cs = 1 - 0.09 * (1 - rho / 3000.0) / (2 * 0.1 + 0.09)
    rock = (1000 + 1.5 * cs * 3000.0) * 0.116 / math.sqrt(duration_s)
    got = crit.ieee80_touch_voltage_v(duration_s, 50, 3000.0,
                                      crit.surface_layer_derating(rho, 3000.0, 0.1))
    assert got == pytest.approx(rock, rel=1e-12)  # rounding only
    # Trade fact (common practice): a crushed-rock layer raises the tolerable
    # touch voltage several-fold.
    assert got > 3 * bare


def test_ieee80_vectorised_over_segments():
    # Same hand formula, evaluated element by element, against one array call.
    t = np.array([0.1, 0.5, 1.0, 2.0])
    rho = np.array([50.0, 100.0, 1000.0, 3000.0])
    got = crit.ieee80_touch_voltage_v(t, 50, rho, np.ones(4))
    want = [(1000 + 1.5 * r) * 0.116 / math.sqrt(ti) for ti, r in zip(t, rho, strict=True)]
    np.testing.assert_allclose(got, want, rtol=1e-12)  # rounding only


# ------------------------------------------------------- tables vs duration

def test_en50522_table_points_reproduced():
    # EN 50522:2010 Table B.3 (from memory): the table's own points must come
    # back. rtol: only the exp(log()) round trip differs.
    got = crit.interpolate_vs_duration(EN50522_DURATION_S, EN50522_DURATION_S, EN50522_U_TP_V)
    np.testing.assert_allclose(got, EN50522_U_TP_V, rtol=1e-12)


def test_en50522_loglog_midpoint_is_geometric_mean():
    # Closed form of linear interpolation on log-log axes: at the geometric mean
    # of two table durations the value is the geometric mean of theirs.
    t1, t2, u1, u2 = 0.2, 0.5, 537.0, 220.0  # EN 50522:2010 Table B.3 (from memory)
    got = crit.interpolate_vs_duration(math.sqrt(t1 * t2), EN50522_DURATION_S, EN50522_U_TP_V)
    assert got == pytest.approx(math.sqrt(u1 * u2), rel=1e-12)  # rounding only


def test_en50522_interpolation_monotone_and_bounded():
    # EN 50522:2010 Figure 4 (from memory): U_Tp falls with duration; the
    # interpolated curve must too, and stay between its neighbouring points.
    t = np.geomspace(0.01, 100.0, 2001)
    u = crit.interpolate_vs_duration(t, EN50522_DURATION_S, EN50522_U_TP_V)
    assert np.all(np.diff(u) <= 0)
    # rtol: exp(log()) round trip only.
    np.testing.assert_allclose([u.max(), u.min()], [716.0, 85.0], rtol=1e-12)


@given(st.floats(min_value=0.05, max_value=10.0), st.floats(min_value=0.05, max_value=10.0))
def test_en50522_interpolation_monotone_property(ta, tb):
    # Same property as above, for arbitrary pairs (EN 50522:2010 Figure 4, from memory).
    ua, ub = crit.interpolate_vs_duration([ta, tb], EN50522_DURATION_S, EN50522_U_TP_V)
    if ta < tb:
        assert ua >= ub
    elif ta > tb:
        assert ua <= ub


def test_interpolation_end_values_held():
    # Documented behaviour: below the table the first (highest) value, beyond it
    # the last; zero or negative durations read as "shortest"; NaN stays NaN.
    got = crit.interpolate_vs_duration([0.001, 0.0, -1.0, 20.0, 1e4, np.nan],
                                       EN50522_DURATION_S, EN50522_U_TP_V)
    # rtol: exp(log()) round trip only.
    np.testing.assert_allclose(got[:5], [716.0, 716.0, 716.0, 85.0, 85.0], rtol=1e-12)
    assert np.isnan(got[5])


@pytest.mark.parametrize("durations, values", [
    ([], []),
    ([0.1, 0.2], [100.0]),
    ([0.2, 0.1], [100.0, 50.0]),
    ([0.0, 0.1], [100.0, 50.0]),
    ([0.1, 0.2], [100.0, -5.0]),
])
def test_interpolation_rejects_bad_tables(durations, values):
    with pytest.raises(ValueError):
        crit.interpolate_vs_duration(0.5, durations, values)


# ------------------------------------------------------------------ ITU-T

@pytest.mark.parametrize("clearing_s, high_rel, expected_v", [
    (0.1, True, 650.0),   # ITU-T Directives (from memory): high-reliability, <= 0.2 s
    (0.2, True, 650.0),   # boundary is inclusive ("within 0.2 s")
    (0.3, True, 430.0),   # slower clearing loses the higher limit
    (0.1, False, 430.0),  # ordinary line
    (0.2, False, 430.0),
    (0.3, False, 430.0),
])
def test_itu_telecom_fault_limit(clearing_s, high_rel, expected_v):
    assert crit.itu_telecom_fault_limit_v(clearing_s, high_rel) == expected_v


def test_itu_telecom_fault_limit_vectorised_and_nan():
    got = crit.itu_telecom_fault_limit_v([0.1, 0.2, 0.3, np.nan], [True, True, True, True])
    np.testing.assert_array_equal(got[:3], [650.0, 650.0, 430.0])  # ITU-T Directives (memory)
    assert np.isnan(got[3])


# ------------------------------------------------------------- ISO 18086

def test_holiday_default_is_one_square_centimetre():
    # ISO 18086:2019 / CEN/TS 15280 (from memory): reference holiday 1 cm2.
    # rtol: the diameter is rounded to four significant figures (0.011284 m),
    # which the area doubles to about 1e-3.
    d = crit.HOLIDAY_1CM2_DIAMETER_M
    assert math.pi * d**2 / 4 == pytest.approx(1e-4, rel=1e-3)


def test_ac_current_density_from_disc_spread_resistance():
    # Independent route: spread resistance of a disc electrode of diameter d on
    # the surface of a half-space, R = rho/(2d) (closed form, any grounding
    # text), current I = V/R over the disc area pi*d^2/4.
    v = np.array([1.0, 4.0, 10.0, 15.0])
    rho = np.array([10.0, 25.0, 100.0, 1000.0])
    d = 0.01128
    want = (v / (rho / (2 * d))) / (math.pi * d**2 / 4)
    np.testing.assert_allclose(crit.ac_current_density_a_per_m2(v, rho), want, rtol=1e-12)

