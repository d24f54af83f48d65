"""Sunde's two-layer soil correction to Carson's earth-return kernel.

Package-internal: :mod:`corridor.physics.earth_return` adds
:func:`_two_layer_correction_ohm_per_m` to its homogeneous impedances when a
soil has two layers (docs/methods.md §9). The names keep their leading
underscore because the demo run has homogeneous soil only, so no demo run
reaches them (tests/physics/test_production_reach.py); they are checked against
an mpmath quadrature in tests/physics/test_two_layer_soil.py.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from corridor.physics._earth_common import reference_is_bottom
from corridor.physics.constants import MU0_H_PER_M

# Sunde's two-layer form of Carson's kernel (docs/methods.md §9): with
# u_i = √(λ² + jωμ0/ρ_i) and a top layer of thickness t, the homogeneous kernel
# 1/(λ + u₁) becomes 1/(λ + Y),
#     Y = u₁(u₂ + u₁ tanh(u₁t)) / (u₁ + u₂ tanh(u₁t)).
# The code adds to the homogeneous impedance in the top-layer resistivity ρ₁
#     ΔZ = jωμ0/π · ΔJ,   ΔJ = ∫₀^∞ e^{−Hλ} cos(λx) g(λ) dλ,   g = 1/(λ+Y) − 1/(λ+u₁),
# H = h_i + h_j. g is written without cancellation:
#     u₁ − Y = u₁(u₁ − u₂)(1 − T)/(u₁ + u₂T),  u₁ − u₂ = j(m₁² − m₂²)/(u₁ + u₂),
#     1 − T = 2E/(1 + E),  T = (1 − E)/(1 + E),  E = e^{−2u₁t}   (Re u₁ > 0),
# so ρ₁ = ρ₂ gives exactly 0 and t → ∞ underflows E to 0.
# ΔJ = ½[G(s) + G(s̄)] with G(s) = ∫₀^∞ e^{−sλ} g(λ) dλ, s = H + jx = D e^{jθ}.
# Each G is integrated along a ray λ = r e^{∓jβ}, β = min(θ, π/6): the factor
# e^{−sλ} then decays instead of oscillating (at H = 0 and x = 5 km the real
# axis would hold thousands of periods). The branch points of u₁, u₂ lie on the
# rays at ∓π/4 with their cuts beyond, so the sector swept by β ≤ π/6 holds
# no singularity (checked against an mpmath quadrature along the real axis in
# tests/physics/test_two_layer_soil.py). Nodes: one Gauss–Legendre panel on
# [0, r_lo] and 8-point panels, 8 per decade of r, up to r_hi.

#: Largest ray angle of the two-layer quadrature [rad] (the branch points sit at π/4).
_TWO_LAYER_RAY_MAX_RAD = math.pi / 6
_GL8_X, _GL8_W = np.polynomial.legendre.leggauss(8)


def _two_layer_g(lam, m1sq, m2sq, thickness_m, reference_bottom=False):
    """g(λ) = 1/(λ + Y) − 1/(λ + u_ref) of the two-layer kernel [m], any complex λ.

    u_ref is u₁ (homogeneous reference in the top resistivity) or, with
    ``reference_bottom``, u₂ (reference in the bottom resistivity).
    """
    u1 = np.sqrt(lam * lam + 1j * m1sq)
    u2 = np.sqrt(lam * lam + 1j * m2sq)
    with np.errstate(under="ignore", over="ignore"):
        e = np.exp(-2.0 * np.minimum((u1 * thickness_m).real, 350.0)
                   - 2j * (u1 * thickness_m).imag)
    tt = (1.0 - e) / (1.0 + e)
    if reference_bottom:
        # u₂ − Y = T·(u₂² − u₁²)/(u₁ + u₂T)
        ref_minus_y = tt * (1j * (m2sq - m1sq)) / (u1 + u2 * tt)
        u_ref = u2
    else:
        ref_minus_y = u1 * (1j * (m1sq - m2sq) / (u1 + u2)) * (2.0 * e / (1.0 + e)) / (
            u1 + u2 * tt)
        u_ref = u1
    y = u_ref - ref_minus_y
    return ref_minus_y / ((lam + y) * (lam + u_ref))


def _two_layer_rows(big_d_m, theta_rad, m1sq, m2sq, thickness_m, reference_bottom=False):
    """ΔJ for rows of points sharing an angle θ; nodes common to a row.

    big_d_m : (n_rows, n_cols) image distances D [m]; theta_rad : (n_rows,).
    """
    big_d_m = np.asarray(big_d_m, float)
    theta = np.asarray(theta_rad, float)
    scales = np.sqrt(np.array([m1sq, m2sq, 1.0 / thickness_m**2]))
    beta = np.minimum(theta, _TWO_LAYER_RAY_MAX_RAD)
    d_min = np.maximum(big_d_m.min(axis=1), 1e-9)
    d_max = np.maximum(big_d_m.max(axis=1), 1e-9)
    lo = 1e-6 * np.minimum(scales.min(), 1.0 / d_max)
    hi = np.minimum(80.0 / (d_min * np.cos(theta - beta)), 1e4 * scales.max())
    hi = np.maximum(hi, 10.0 * lo)
    n_pan = np.ceil(8 * np.log10(hi / lo)).astype(np.int64).max()
    u = np.linspace(0.0, 1.0, n_pan + 1)
    edges = lo[:, None] * (hi / lo)[:, None] ** u
    a, b = edges[:, :-1], edges[:, 1:]
    r = np.concatenate([0.5 * lo[:, None] * (_GL8_X + 1.0),
                        (0.5 * (b - a)[..., None] * (_GL8_X + 1.0) + a[..., None]).reshape(
                            len(theta), -1)], axis=1)
    w = np.concatenate([0.5 * lo[:, None] * _GL8_W,
                        (0.5 * (b - a)[..., None] * _GL8_W).reshape(len(theta), -1)], axis=1)
    out = np.zeros(big_d_m.shape, complex)
    for sign in (1.0, -1.0):
        rot = np.exp(-1j * sign * beta)[:, None]
        lam = r * rot  # (n_rows, n_nodes)
        weights = w * _two_layer_g(lam, m1sq, m2sq, thickness_m, reference_bottom) * rot
        s_dir = np.exp(1j * sign * theta)[:, None]
        with np.errstate(under="ignore"):
            kernel = np.exp(-(big_d_m[:, :, None] * (s_dir * lam)[:, None, :]))
        out += 0.5 * np.einsum("rcn,rn->rc", kernel, weights)
    return out


class _TwoLayerTable:
    """Bicubic table of the two-layer correction ΔJ(D, θ) for one soil.

    Parameters
    ----------
    top_resistivity_ohm_m, bottom_resistivity_ohm_m : float
        ρ₁ (top layer) and ρ₂ (below it) [Ω·m].
    top_thickness_m : float
        Thickness t of the top layer [m].
    frequency_hz : float
        Frequency [Hz].
    reference_bottom : bool
        ΔJ against the homogeneous kernel in ρ₂ (True) or in ρ₁ (False);
        see :func:`corridor.physics._earth_common.reference_is_bottom`.

    Notes
    -----
    Grid: log D from 1e-3 m to 2e4 m at 8 points per decade, θ over
    [0, π/2] in 16 steps (about 0.1 s to build); ``scipy.interpolate.RectBivariateSpline`` (cubic)
    on the real and imaginary parts. Points outside the D range are
    integrated directly. Agrees with an mpmath quadrature of the two-layer
    integral within 1 % of Z over 1 m..5 km, heights 0..60 m, 1..1e4 Ω·m,
    t 0.1..1000 m, 50/60 Hz (tests/physics/test_two_layer_soil.py).
    """

    D_MIN_M = 1e-3
    D_MAX_M = 2e4

    def __init__(self, top_resistivity_ohm_m, bottom_resistivity_ohm_m, top_thickness_m,
                 frequency_hz, reference_bottom=False):
        w = 2.0 * math.pi * float(frequency_hz)
        self.m1sq = w * MU0_H_PER_M / float(top_resistivity_ohm_m)
        self.m2sq = w * MU0_H_PER_M / float(bottom_resistivity_ohm_m)
        self.thickness_m = float(top_thickness_m)
        self.reference_bottom = bool(reference_bottom)
        n_d = round(8 * math.log10(self.D_MAX_M / self.D_MIN_M)) + 1
        self.log_d = np.linspace(math.log(self.D_MIN_M), math.log(self.D_MAX_M), n_d)
        self.theta = np.linspace(0.0, 0.5 * math.pi, 17)
        from scipy import interpolate  # heavy import, only where a soil has two layers

        values = _two_layer_rows(np.broadcast_to(np.exp(self.log_d), (len(self.theta), n_d)),
                                 self.theta, self.m1sq, self.m2sq, self.thickness_m,
                                 self.reference_bottom).T
        self._re = interpolate.RectBivariateSpline(self.log_d, self.theta, values.real)
        self._im = interpolate.RectBivariateSpline(self.log_d, self.theta, values.imag)

    def evaluate(self, big_d_m, theta_rad):
        """ΔJ(D, θ) [-] at image distance D [m] and angle θ [rad]."""
        d, th = np.broadcast_arrays(np.asarray(big_d_m, float), np.asarray(theta_rad, float))
        shape = d.shape
        d = d.ravel()
        th = th.ravel()
        out = np.empty(d.shape, complex)
        inside = (d >= self.D_MIN_M) & (d <= self.D_MAX_M)
        if inside.any():
            ld = np.log(d[inside])
            out[inside] = self._re.ev(ld, th[inside]) + 1j * self._im.ev(ld, th[inside])
        if (~inside).any():
            out[~inside] = _two_layer_rows(d[~inside, None], th[~inside], self.m1sq, self.m2sq,
                                           self.thickness_m, self.reference_bottom)[:, 0]
        return out.reshape(shape)


@functools.lru_cache(maxsize=256)
def _two_layer_table(rho1, rho2, thickness_m, frequency_hz, reference_bottom):
    return _TwoLayerTable(rho1, rho2, thickness_m, frequency_hz, reference_bottom)


def _two_layer_correction_ohm_per_m(big_d, theta, rho1, rho2, thickness_m, f):
    """jωμ0/π·ΔJ per point against the reference soil [Ω/m]; 0 where homogeneous."""
    big_d, theta, rho1, rho2, thickness_m, f = (
        a.ravel() for a in np.broadcast_arrays(big_d, theta, rho1, rho2, thickness_m, f))
    out = np.zeros(big_d.shape, complex)
    layered = (rho1 != rho2) & np.isfinite(thickness_m) & np.isfinite(rho2)
    if not layered.any():
        return out
    ref_bottom = reference_is_bottom(rho1, rho2, thickness_m, f)
    keys = np.stack([rho1, rho2, thickness_m, f, ref_bottom])[:, layered]
    uniq, inv = np.unique(keys, axis=1, return_inverse=True)
    inv = inv.ravel()
    idx = np.flatnonzero(layered)
    for k in range(uniq.shape[1]):
        sel = idx[inv == k]
        rho1_k, rho2_k, t_k, f_k, ref_k = (float(v) for v in uniq[:, k])
        table = _two_layer_table(rho1_k, rho2_k, t_k, f_k, bool(ref_k))
        out[sel] = (1j * MU0_H_PER_M / math.pi) * 2.0 * math.pi * uniq[3, k] * table.evaluate(
            big_d[sel], theta[sel])
    return out
