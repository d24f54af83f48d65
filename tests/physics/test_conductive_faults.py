"""Tower current share, zone of influence and step voltage against closed forms."""

import numpy as np
import pytest
from scipy.integrate import quad

from corridor.physics import conductive as cond


def _finite_ladder_share(span_impedance_ohm, footing_resistance_ohm, spans_left, spans_right):
    """Reference: nodal solve of a finite ladder, fault current injected at tower 0.

    Towers -spans_left..spans_right are earth-wire nodes joined by the span impedance;
    each tower goes to remote earth through its footing resistance.
    """
    n = spans_left + spans_right + 1
    y = np.zeros((n, n), complex)
    ys = 1.0 / span_impedance_ohm
    for k in range(n - 1):
        y[k, k] += ys
        y[k + 1, k + 1] += ys
        y[k, k + 1] -= ys
        y[k + 1, k] -= ys
    y[np.arange(n), np.arange(n)] += 1.0 / footing_resistance_ohm
    rhs = np.zeros(n, complex)
    rhs[spans_left] = 1.0
    v = np.linalg.solve(y, rhs)
    return abs(v[spans_left] / footing_resistance_ohm)


@pytest.mark.parametrize("zs, rt", [(0.075 + 0.21j, 159.0), (1.2 + 0.25j, 10.0),
                                    (0.3 + 0.2j, 25.0)])
def test_tower_share_matches_a_long_finite_ladder(zs, rt):
    # Independent reference computation: nodal analysis of a ladder of 600 spans each side
    # (Endrenyi's infinite ladder is its limit; docs/methods.md §4.3).
    ref_mid = _finite_ladder_share(zs, rt, 600, 600)
    ref_end = _finite_ladder_share(zs, rt, 0, 600)
    assert cond.tower_current_share(zs, rt, 2) == pytest.approx(ref_mid, rel=1e-9)
    assert cond.tower_current_share(zs, rt, 1) == pytest.approx(ref_end, rel=1e-9)


def test_ladder_impedance_is_its_own_continuation():
    # Closed form (docs/methods.md §4.3): Z∞ = Z_s + R_t·Z∞/(R_t + Z∞).
    zs, rt = 0.4 + 0.3j, 20.0
    z = cond.ladder_impedance_ohm(zs, rt)
    assert z == pytest.approx(zs + rt * z / (rt + z), rel=1e-13)
    assert z.real > 0


def test_opgw_in_resistive_soil_and_no_earth_wire():
    # Fact of the trade the share must reproduce (issue 14; typical 5-30 % with earth wires,
    # from memory): a 300 m span of an OPGW earth wire (about 0.25 + j0.7 Ω/km with earth
    # return, from memory) and a 1 m footing in 1,000 Ω·m soil discharge a few per cent;
    # a line without earth wire discharges the whole current at the tower.
    rt = cond.footing_resistance_ohm(1000.0, 1.0)
    share = cond.tower_current_share((0.25 + 0.7j) * 0.3, rt)
    assert 0.01 < share < 0.05
    assert cond.tower_current_share(np.inf, rt) == 1.0
    assert cond.tower_current_share(np.nan + 0j, rt) == 1.0


def test_footing_resistance_of_a_hemisphere():
    # IEEE Std 80 / any grounding text (docs/methods.md §4.1): R = ρ/(2π r0).
    assert cond.footing_resistance_ohm(100.0, 1.0) == pytest.approx(100 / (2 * np.pi))


def test_zone_of_influence():
    # Closed form r = ρI/(2πV) (hemisphere, docs/methods.md §4.1). Issue 14's example:
    # in 1,000 Ω·m soil, 2 kA gives more than 1 kV at 300 m.
    r = cond.zone_of_influence_m(2000.0, 1000.0, 1000.0)
    assert r == pytest.approx(1000 * 2000 / (2 * np.pi * 1000))
    assert r > 300.0
    assert cond.earth_potential_hemisphere(2000.0, 1000.0, r, 1.0) == pytest.approx(1000.0)


@pytest.mark.parametrize("r", [0.5, 1.0, 3.0, 25.0])
def test_step_voltage_is_the_integral_of_the_surface_field(r):
    # Independent reference: the surface field of a hemisphere, E = ρI/(2π r²) for r ≥ r0
    # and 0 inside, integrated over a 1 m step (IEEE Std 80 step voltage, 1 m).
    rho, i, r0 = 300.0, 1500.0, 1.0

    def field(s):
        return rho * i / (2 * np.pi * s * s) if s >= r0 else 0.0

    ref, _ = quad(field, r, r + 1.0, points=[r0] if r < r0 < r + 1 else None,
                  epsabs=0, epsrel=1e-12)
    assert cond.step_voltage_hemisphere(i, rho, r, r0) == pytest.approx(ref, rel=1e-10)
