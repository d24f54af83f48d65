"""Electric-field pickup of a fence of bonded wires (docs/methods.md §3.2, §10).

Reference: the full Maxwell potential-coefficient system of the line conductors
and every fence wire, with images in the earth plane (Glover, Sarma, Overbye,
Power System Analysis and Design, ch. 4), written out and solved here directly:
grounded bundle V_w = 0; floating bundle at one unknown potential with no net
charge. Production: :func:`corridor.physics.capacitive.capacitive_coupling`.
"""

import math

import numpy as np
import pytest

from corridor.physics import capacitive as cap
from corridor.physics.constants import EPS0_F_PER_M

# 345 kV flat line (typical, docs/methods.md §7, from memory): phases at −8, 0, 8 m, 20 m
# high, bundle-equivalent radius 0.15 m; earth wires at ±5 m, 28 m, radius 6 mm.
XC = np.array([-8.0, 0.0, 8.0, -5.0, 5.0])
HC = np.array([20.0, 20.0, 20.0, 28.0, 28.0])
RC = np.array([0.15, 0.15, 0.15, 0.006, 0.006])
VC = cap.phase_to_earth_voltages(345.0, ["A", "B", "C", "", ""])
F_HZ = 60.0


def _full_system(offset_m, wire_heights_m, wire_radius_m):
    """Short-circuit current per metre and floating voltage of the bonded wires."""
    x = np.r_[XC, np.full(len(wire_heights_m), offset_m)]
    h = np.r_[HC, wire_heights_m]
    r = np.r_[RC, np.full(len(wire_heights_m), wire_radius_m)]
    n = len(x)
    p = np.empty((n, n))
    for i in range(n):
        for j in range(n):
            big = math.hypot(x[i] - x[j], h[i] + h[j])
            small = r[i] if i == j else math.hypot(x[i] - x[j], h[i] - h[j])
            p[i, j] = math.log(big / small) / (2 * math.pi * EPS0_F_PER_M)
    nc = len(XC)
    # grounded: all wires at 0 V
    q = np.linalg.solve(p.astype(complex), np.r_[VC, np.zeros(n - nc)])
    i_sc = 1j * 2 * math.pi * F_HZ * q[nc:].sum()
    # floating, bonded: unknowns q (n) and V_w; P q − e·V_w = [V_c; 0], Σ q_w = 0
    a = np.zeros((n + 1, n + 1), complex)
    a[:n, :n] = p
    a[nc:n, n] = -1.0
    a[n, nc:n] = 1.0
    sol = np.linalg.solve(a, np.r_[VC, np.zeros(n - nc), 0.0])
    return i_sc, sol[n]


@pytest.mark.parametrize("n_wires", [1, 2, 4])
@pytest.mark.parametrize("offset_m", [12.0, 40.0, 120.0])
def test_bonded_bundle_matches_the_full_potential_coefficient_solution(n_wires, offset_m):
    spacing, mid, r_w = 0.3, 1.0, 1.25e-3
    heights = mid + (np.arange(n_wires) - 0.5 * (n_wires - 1)) * spacing
    i_ref, v_ref = _full_system(offset_m, heights, r_w)
    got = cap.capacitive_coupling(XC, HC, RC, VC, offset_m, mid, r_w, F_HZ,
                                  asset_wire_count=n_wires, asset_wire_spacing_m=spacing)
    assert complex(got.short_circuit_current_a_per_m[0]) == pytest.approx(i_ref, rel=1e-9)
    assert complex(got.open_circuit_voltage_v[0]) == pytest.approx(v_ref, rel=1e-9)


def test_bundle_picks_up_more_than_one_wire_but_less_than_n_times():
    # Bonded wires screen one another: 1 < I_bundle/I_one < n (capacitance of bonded
    # conductors; docs/methods.md §10). Issue 15 measured +44 % for 4 wires on the demo.
    one = cap.capacitive_coupling(XC, HC, RC, VC, [15.0, 60.0], 1.0, 1.25e-3, F_HZ)
    four = cap.capacitive_coupling(XC, HC, RC, VC, [15.0, 60.0], 1.0, 1.25e-3, F_HZ,
                                   asset_wire_count=4)
    ratio = np.abs(four.short_circuit_current_a_per_m) / np.abs(one.short_circuit_current_a_per_m)
    assert np.all((ratio > 1.2) & (ratio < 4.0))
    # the bundle's floating voltage is an average over its wires' heights: close to one wire's
    # at the middle height (within 5 % here), not above the top wire's
    top = cap.capacitive_coupling(XC, HC, RC, VC, [15.0, 60.0], 1.45, 1.25e-3, F_HZ)
    assert np.all(np.abs(four.open_circuit_voltage_v) < np.abs(top.open_circuit_voltage_v))
    np.testing.assert_allclose(np.abs(four.open_circuit_voltage_v),
                               np.abs(one.open_circuit_voltage_v), rtol=0.05)
