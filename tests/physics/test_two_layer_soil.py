"""Two-layer earth in the earth-return impedances (docs/methods.md §9).

Reference: Sunde's two-layer form of Carson's integral, integrated by mpmath
along the real axis in tests/physics/two_layer_reference.py (E. D. Sunde,
Earth Conduction Effects in Transmission Systems, 1968). The production path
is :func:`corridor.physics.earth_return.mutual_impedance` and
``self_impedance`` with ``bottom_resistivity_ohm_m`` and ``top_thickness_m``.
"""

import numpy as np
import pytest

from corridor.physics import earth_return as er
from tests.physics.reference import carson_mutual_impedance
from tests.physics.two_layer_reference import two_layer_mutual_impedance


def _prod(hi, hj, x, rho1, rho2, t, f):
    return complex(er.mutual_impedance(hi, hj, x, rho1, f, bottom_resistivity_ohm_m=rho2,
                                       top_thickness_m=t))


def test_reference_with_equal_layers_is_carson():
    # The two-layer integral with ρ₁ = ρ₂ is Carson's (Y = u₁); checks the reference itself
    # against Carson 1926 (tests/physics/reference.py).
    for hi, hj, x in [(20.0, 0.0, 50.0), (15.0, 2.0, 700.0)]:
        ref = two_layer_mutual_impedance(hi, hj, x, 100.0, 100.0, 5.0, 50.0)
        carson = complex(carson_mutual_impedance(hi, hj, x, 100.0, 50.0))
        assert ref == pytest.approx(carson, rel=1e-6)


def test_equal_layers_reproduce_the_homogeneous_value():
    x = np.array([1.0, 30.0, 400.0, 3000.0])
    for h_asset in (-1.5, 1.0):
        hom = er.mutual_impedance(22.0, h_asset, x, 250.0, 60.0)
        lay = er.mutual_impedance(22.0, h_asset, x, 250.0, 60.0, bottom_resistivity_ohm_m=250.0,
                                  top_thickness_m=4.0)
        np.testing.assert_allclose(lay, hom, rtol=1e-14)
    hom = er.self_impedance([12.0, -1.0], [0.01, 0.25], 0.0, 250.0, 60.0)
    lay = er.self_impedance([12.0, -1.0], [0.01, 0.25], 0.0, 250.0, 60.0,
                            bottom_resistivity_ohm_m=250.0, top_thickness_m=4.0)
    np.testing.assert_allclose(lay, hom, rtol=1e-14)


@pytest.mark.parametrize("rho1, rho2", [(30.0, 1000.0), (2000.0, 20.0)])
def test_thin_and_thick_top_layer_limits(rho1, rho2):
    # Limits of Sunde's Y (derived, docs/methods.md §9): t → 0 gives ρ₂, t → ∞ gives ρ₁.
    x = np.array([2.0, 50.0, 300.0, 2500.0])
    thin = er.mutual_impedance(18.0, -1.0, x, rho1, 50.0, bottom_resistivity_ohm_m=rho2,
                               top_thickness_m=1e-3)
    exact = {"low_frequency_k_bound": 0.0}  # the exact homogeneous forms, as under layers
    np.testing.assert_allclose(thin, er.mutual_impedance(18.0, -1.0, x, rho2, 50.0, **exact),
                               rtol=2e-3)
    thick = er.mutual_impedance(18.0, -1.0, x, rho1, 50.0, bottom_resistivity_ohm_m=rho2,
                                top_thickness_m=1e6)
    np.testing.assert_allclose(thick, er.mutual_impedance(18.0, -1.0, x, rho1, 50.0, **exact),
                               rtol=1e-6)


@pytest.mark.parametrize("case", [
    (20.0, 0.0, 50.0, 30.0, 1000.0, 3.0, 50.0),     # the 3 m of 30 Ω·m over 1000 Ω·m
    (20.0, 0.0, 300.0, 30.0, 1000.0, 3.0, 50.0),
    (0.0, 0.0, 2000.0, 1000.0, 10.0, 10.0, 60.0),   # both on the surface, far apart
    (40.0, -1.0, 5000.0, 100.0, 1e4, 100.0, 50.0),
])
def test_production_agrees_with_mpmath_quadrature(case):
    ref = two_layer_mutual_impedance(*case)
    # 1e-3: the table reproduces the integral to ~1e-4 of Z (docs/methods.md §9)
    assert _prod(*case) == pytest.approx(ref, rel=1e-3)


def test_production_within_one_percent_over_the_range_in_use():
    # Issue 15: separations 1 m..5 km, heights −3..60 m, 1..1e4 Ω·m, t 0.1..1000 m, 50/60 Hz.
    rng = np.random.default_rng(2026)
    worst = 0.0
    for _ in range(8):
        hi = rng.uniform(5.0, 60.0)  # a line conductor
        hj = rng.choice([rng.uniform(-3.0, 0.0), rng.uniform(0.0, 60.0)])
        x = float(np.exp(rng.uniform(0.0, np.log(5000.0))))
        rho1, rho2 = np.exp(rng.uniform(0.0, np.log(1e4), 2))
        t = float(np.exp(rng.uniform(np.log(0.1), np.log(1000.0))))
        f = float(rng.choice([50.0, 60.0]))
        ref = two_layer_mutual_impedance(hi, hj, x, rho1, rho2, t, f)
        rel = abs(_prod(hi, hj, x, rho1, rho2, t, f) - ref) / abs(ref)
        worst = max(worst, rel)
    assert worst < 0.01


def test_extreme_contrasts_at_the_corners_of_the_range():
    for case in [(25.0, 1.0, 1.0, 1e4, 1.0, 0.1, 50.0),
                 (60.0, 60.0, 5000.0, 1.0, 1e4, 1000.0, 60.0),
                 (30.0, -3.0, 5000.0, 1e4, 1.0, 0.1, 50.0),
                 (8.0, 0.0, 1.0, 1.0, 1e4, 0.1, 60.0)]:
        assert _prod(*case) == pytest.approx(two_layer_mutual_impedance(*case), rel=0.01)


def test_self_impedance_over_two_layers():
    # Self impedance = the mutual form with d = radius (Carson 1926; Sunde 1968 on the
    # surface): overhead wire at 10 m, and a buried pipe of radius 0.25 m taken at the surface.
    z = er.self_impedance([10.0, -1.5], [0.01, 0.25], 0.0, 30.0, 50.0,
                          bottom_resistivity_ohm_m=1000.0, top_thickness_m=3.0)
    ref_overhead = two_layer_mutual_impedance(10.0, 10.0, 0.01, 30.0, 1000.0, 3.0, 50.0)
    ref_surface = two_layer_mutual_impedance(0.0, 0.0, 0.25, 30.0, 1000.0, 3.0, 50.0)
    assert z[0] == pytest.approx(ref_overhead, rel=1e-3)
    assert z[1] == pytest.approx(ref_surface, rel=1e-3)


def test_top_layer_alone_misjudges_the_mutual_impedance():
    # Issue 15's measurement: with 3 m of 30 Ω·m over 1000 Ω·m, the top-layer value alone is
    # wrong at 300 m by a factor of about 3; the reference quadrature says the same.
    ref = two_layer_mutual_impedance(20.0, -1.0, 300.0, 30.0, 1000.0, 3.0, 50.0)
    top_only = complex(er.mutual_impedance(20.0, -1.0, 300.0, 30.0, 50.0))
    assert 2.0 < abs(ref) / abs(top_only) < 4.0
    assert _prod(20.0, -1.0, 300.0, 30.0, 1000.0, 3.0, 50.0) == pytest.approx(ref, rel=1e-3)


def test_non_positive_thickness_is_refused():
    with pytest.raises(ValueError, match="top_thickness_m"):
        er.mutual_impedance(20.0, 0.0, 10.0, 30.0, 50.0, bottom_resistivity_ohm_m=100.0,
                            top_thickness_m=0.0)
