"""Reference computations the physics tests compare production functions with.

Written out here from the published formulas, independently of the
production dispatcher; only Carson's integral J itself comes from
:func:`corridor.physics.earth_return.carson_correction_dimensionless`, which
``test_earth_return`` checks against an mpmath quadrature of the integral.
"""

import numpy as np

from corridor.physics import earth_return as er
from corridor.physics.constants import MU0_H_PER_M


def carson_mutual_impedance(height_i_m, height_j_m, horizontal_offset_m, soil_resistivity_ohm_m,
                            frequency_hz):
    """Carson's mutual earth-return impedance with the exact integral [Ω/m].

    Z = jωμ0/(2π)·[ln(D/d) + 2J(D·√(ωμ0/ρ), θ)] (J. R. Carson, Bell System
    Technical Journal 5, 1926); heights ≤ 0 taken as the surface.
    """
    hi = np.maximum(np.asarray(height_i_m, float), 0.0)
    hj = np.maximum(np.asarray(height_j_m, float), 0.0)
    x = np.abs(np.asarray(horizontal_offset_m, float))
    big_d = np.maximum(np.hypot(x, hi + hj), er.MIN_SEPARATION_M)
    small_d = np.maximum(np.hypot(x, hi - hj), er.MIN_SEPARATION_M)  # as production floors d
    theta = np.arctan2(x, hi + hj)
    w = 2 * np.pi * np.asarray(frequency_hz, float)
    m = np.sqrt(w * MU0_H_PER_M / np.asarray(soil_resistivity_ohm_m, float))
    big_d, small_d, theta, m, w = np.broadcast_arrays(big_d, small_d, theta, m, w)
    j = er.carson_correction_dimensionless(big_d * m, theta)
    return 1j * w * MU0_H_PER_M / (2 * np.pi) * (np.log(big_d / small_d) + 2.0 * j)


def carson_impedance_matrix(x_m, height_m, gmr_m, resistance_ohm_per_m, soil_resistivity_ohm_m,
                            frequency_hz):
    """Primitive impedance matrix with Carson's exact integral everywhere [Ω/m].

    z_ii = R_i + Z(2h_i, d = GMR_i), z_ij = Z(h_i, h_j, |x_i − x_j|)
    (W. H. Kersting, Distribution System Modeling and Analysis, ch. 4).
    """
    x = np.asarray(x_m, float)
    h = np.asarray(height_m, float)
    n = x.size
    z = carson_mutual_impedance(h[:, None], h[None, :], x[:, None] - x[None, :],
                                soil_resistivity_ohm_m, frequency_hz)
    w = 2 * np.pi * frequency_hz
    m = np.sqrt(w * MU0_H_PER_M / soil_resistivity_ohm_m)
    j = er.carson_correction_dimensionless(2 * h * m, np.zeros(n))
    diag = np.asarray(resistance_ohm_per_m) + 1j * w * MU0_H_PER_M / (2 * np.pi) * (
        np.log(2 * h / np.asarray(gmr_m)) + 2 * j)
    z[np.arange(n), np.arange(n)] = diag
    return z
