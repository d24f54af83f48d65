"""Earth-return impedances of long parallel conductors over homogeneous soil.

All functions take array_like inputs that broadcast against each other and
return complex phasor impedances per unit length [Ω/m]. Heights are metres
above the earth surface; a height ≤ 0 (buried or on the surface) is treated
as the surface, the common practice for shallow buried assets.

Symbols used throughout: ω = 2πf, m = √(ωμ0/ρ) [1/m], d = √(x² + (hi−hj)²),
D = √(x² + (hi+hj)²), dimensionless r = D·m and θ = atan(x/(hi+hj)).
The Carson integral is written in dimensionless form

    J(r, θ) = ∫₀^∞ e^{−u r cosθ} cos(u r sinθ) / (u + √(u² + j)) du

so that Z = jωμ0/(2π)·[ln(D/d) + 2J(r, θ)].

J is evaluated with Carson's convergent series (written here in the compact
Struve/Bessel form: J = ½[F(r e^{−jθ}) + F(r e^{jθ})] with
F(s) = π/(2z)·[H₁(z) − Y₁(z)] + j/s², z = e^{jπ/4}s) for r ≤ 16, and with
the asymptotic expansion of F plus its exponentially small Stokes term for
r > 16. Both agree with an mpmath quadrature of the integral to ~1e-8.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import ndimage, special

from corridor.physics.constants import EULER_GAMMA, MU0_H_PER_M

__all__ = [
    "LOW_FREQUENCY_K_BOUND",
    "MIN_SEPARATION_M",
    "CarsonTable",
    "carson_correction_dimensionless",
    "carson_correction_fast",
    "carson_correction_table",
    "equivalent_earth_depth_m",
    "low_frequency_mutual_impedance",
    "mutual_impedance",
    "self_impedance",
    "surface_mutual_impedance",
]

#: Largest k = D·√(ωμ0/ρ) at which the low-frequency form stays within 1 % of
#: Carson's integral for every angle θ, in the worst geometry ln(D/d) = 0
#: (any ln(D/d) > 0 only lowers the relative error). Found numerically by
#: bisection on max_θ |Z_LF − Z_Carson|/|Z_Carson| = 0.01 (see
#: ``test_low_frequency_bound_is_where_error_reaches_one_percent`` in
#: tests/physics/test_earth_return.py); the worst angle is θ = 0. In typical
#: geometries, where ln(D/d) > 0, the error stays near 1 % up to k ≈ 0.2 (from memory).
LOW_FREQUENCY_K_BOUND = 0.056

#: Separations below this are floored to it to keep ln(D/d) finite [m].
MIN_SEPARATION_M = 1e-6

#: Exact constant of De = C·√(ρ/f): C = 2·e^{1/2−γ}/√(8π²·10⁻⁷) ≈ 658.87 [m·√(Hz/(Ω·m))].
EQUIVALENT_DEPTH_CONSTANT = 2.0 * math.exp(0.5 - EULER_GAMMA) / math.sqrt(
    2.0 * math.pi * MU0_H_PER_M
)

# -- Series and asymptotic coefficients (computed once at import; pure numbers) --
_N_SERIES = 48
_K = np.arange(_N_SERIES)
_C_STRUVE = (-1.0) ** _K / (special.gamma(_K + 1.5) * special.gamma(_K + 2.5))
_C_BESSEL_J = (-1.0) ** _K / (special.factorial(_K) * special.factorial(_K + 1))
_C_BESSEL_Y = _C_BESSEL_J * (special.digamma(_K + 1) + special.digamma(_K + 2))
_N_ASYM = 9
_NA = np.arange(_N_ASYM + 1)
_C_ASYM = special.binom(0.5, _NA) * (1j) ** (-_NA) * special.factorial(2 * _NA)
_SQRT_J = np.exp(0.25j * np.pi)
_SERIES_R_MAX = 16.0


def _omega(frequency_hz):
    return 2.0 * np.pi * np.asarray(frequency_hz, dtype=float)


def _wavenumber_per_m(soil_resistivity_ohm_m, frequency_hz):
    """m = √(ωμ0/ρ) [1/m]."""
    return np.sqrt(_omega(frequency_hz) * MU0_H_PER_M / np.asarray(soil_resistivity_ohm_m, float))


def _f_series(s):
    """F(s) by the convergent (Carson) series, any |s|, accurate for |s| ≲ 16."""
    w = 0.5 * _SQRT_J * s
    w2 = w * w
    h = np.zeros_like(w)
    j1 = np.zeros_like(w)
    y = np.zeros_like(w)
    for i in range(_N_SERIES - 1, -1, -1):
        h = h * w2 + _C_STRUVE[i]
        j1 = j1 * w2 + _C_BESSEL_J[i]
        y = y * w2 + _C_BESSEL_Y[i]
    return 0.25 * np.pi * w * h - 0.5 * np.log(w) * j1 + 0.25 * y


def _f_asymptotic(s):
    """F(s) by its asymptotic series plus the Stokes term, accurate for |s| ≳ 12."""
    s2 = s * s
    acc = np.zeros_like(s)
    for i in range(_N_ASYM, -1, -1):
        acc = acc / s2 + _C_ASYM[i]
    out = 1j / s2 - 1j * _SQRT_J * acc / s
    z = _SQRT_J * s
    beyond = np.angle(z) > 0.5 * np.pi
    if np.any(beyond):
        zb = z[beyond]
        out[beyond] += np.pi / zb * 1j * special.hankel2(1, -zb)
    return out


def _f_exact(s):
    s = np.asarray(s, dtype=complex)
    out = np.empty_like(s)
    small = np.abs(s) <= _SERIES_R_MAX
    out[small] = _f_series(s[small])
    out[~small] = _f_asymptotic(s[~small])
    return out


def carson_correction_dimensionless(r, theta_rad):
    """Carson's earth-return integral J(r, θ) in dimensionless form, exact (builds the table).

    Parameters
    ----------
    r : array_like
        Dimensionless image distance r = D·√(ωμ0/ρ) [-], r > 0.
    theta_rad : array_like
        Angle θ = atan(x/(hi+hj)) [rad], 0 ≤ θ ≤ π/2.

    Returns
    -------
    ndarray of complex
        J(r, θ) [-].

    Notes
    -----
    J = ∫₀^∞ e^{−u r cosθ} cos(u r sinθ)/(u + √(u² + j)) du
      = ½[F(r e^{−jθ}) + F(r e^{jθ})],
    F(s) = ∫₀^∞ e^{−su}/(u + √(u²+j)) du = π/(2z)·[H₁(z) − Y₁(z)] + j/s²,
    z = e^{jπ/4}s (Laplace transform of √(u²+a²)). Power series of H₁ and
    of Y₁ + 2/(πz) (the 2/(πz) cancels j/s² exactly) for r ≤ 16; for r > 16
    the asymptotic series F ~ j/s² − j√j Σ C(½,n) j^{−n}(2n)!/s^{2n+1}
    (n ≤ 9) plus 2πj/(2z)·H₁⁽²⁾(−z) beyond the Stokes line arg z = π/2.
    The series is Carson's 1926 series in complex notation: its first terms
    give J ≈ ½(ln 2 − γ + ½ − ln r) − jπ/8 + (√2/6)(1+j) r cosθ.

    References
    ----------
    .. [1] J. R. Carson, "Wave propagation in overhead wires with ground
       return", Bell System Technical Journal 5, 539–554, 1926.
    .. [2] T. Theodoulidis, "Exact solution of Pollaczek's integral for
       evaluation of earth-return impedance for underground conductors" /
       Struve-function forms of Carson's integral, Periodica Polytechnica
       EECS 59(1), 2015, doi:10.3311/PPee.7894.
    .. [3] NIST DLMF §11.2, §11.6 (Struve functions), §10.11 (Bessel
       analytic continuation).
    """
    r, theta = np.broadcast_arrays(np.asarray(r, float), np.asarray(theta_rad, float))
    shape = r.shape
    r = r.ravel()
    theta = theta.ravel()
    e = np.exp(1j * theta)
    out = 0.5 * (_f_exact(r / e) + _f_exact(r * e))
    return out.reshape(shape)


def _low_frequency_j(r):
    """Leading terms of J: ½(ln 2 − γ + ½ − ln r) − jπ/8."""
    return 0.5 * (math.log(2.0) - EULER_GAMMA + 0.5 - np.log(r)) - 0.125j * np.pi


def _geometry(height_i_m, height_j_m, horizontal_offset_m):
    hi = np.maximum(np.asarray(height_i_m, float), 0.0)
    hj = np.maximum(np.asarray(height_j_m, float), 0.0)
    x = np.abs(np.asarray(horizontal_offset_m, float))
    big_d = np.maximum(np.hypot(x, hi + hj), MIN_SEPARATION_M)
    small_d = np.maximum(np.hypot(x, hi - hj), MIN_SEPARATION_M)
    theta = np.arctan2(x, hi + hj)
    return big_d, small_d, theta


class CarsonTable:
    """Bicubic-spline table of J(r, θ) on log-spaced r and uniform θ.

    Parameters
    ----------
    r_min, r_max : float
        Range of r covered [-]; outside it, the small-r series terms or the
        asymptotic form are used directly.
    points_per_decade : int
        Grid density in log r.
    theta_steps : int
        Number of θ intervals over [0, π/2].

    Notes
    -----
    The grid carries ghost cells beyond each edge (J continues analytically
    to θ < 0 and θ > π/2; it is even in θ) so the cubic B-spline keeps its
    interior accuracy up to the edges. Coefficients come from
    ``scipy.ndimage.spline_filter``; evaluation uses
    ``scipy.ndimage.map_coordinates`` (order 3).
    """

    _GHOST = 14

    def __init__(self, r_min=1e-4, r_max=1e3, points_per_decade=40, theta_steps=64):
        self.r_min = float(r_min)
        self.r_max = float(r_max)
        self.log_step = math.log(10.0) / points_per_decade
        self.theta_step = 0.5 * math.pi / theta_steps
        g = self._GHOST
        n_t = round(math.log(self.r_max / self.r_min) / self.log_step) + 1 + 2 * g
        n_th = theta_steps + 1 + 2 * g
        self.log_r0 = math.log(self.r_min) - g * self.log_step
        self.theta0 = -g * self.theta_step
        log_r = self.log_r0 + self.log_step * np.arange(n_t)
        theta = self.theta0 + self.theta_step * np.arange(n_th)
        values = carson_correction_dimensionless(np.exp(log_r)[:, None], theta[None, :])
        self.coefficients_real = ndimage.spline_filter(values.real, order=3, mode="mirror")
        self.coefficients_imag = ndimage.spline_filter(values.imag, order=3, mode="mirror")

    def evaluate(self, r, theta_rad):
        """Interpolated J(r, θ) [-]; r outside [r_min, r_max] handled analytically."""
        r, theta = np.broadcast_arrays(np.asarray(r, float), np.asarray(theta_rad, float))
        shape = r.shape
        r = r.ravel()
        theta = theta.ravel()
        out = np.empty(r.shape, dtype=complex)
        inside = (r >= self.r_min) & (r <= self.r_max)
        if inside.all():
            out = self._interp(r, theta)
        else:
            out[inside] = self._interp(r[inside], theta[inside])
            low = r < self.r_min
            if low.any():
                rl = r[low]
                out[low] = _low_frequency_j(rl) + (math.sqrt(2.0) / 6.0) * (1 + 1j) * rl * np.cos(
                    theta[low]
                )
            high = r > self.r_max
            if high.any():
                out[high] = carson_correction_dimensionless(r[high], theta[high])
        return out.reshape(shape)

    def _interp(self, r, theta):
        coords = np.empty((2, r.size))
        np.log(r, out=coords[0])
        coords[0] -= self.log_r0
        coords[0] *= 1.0 / self.log_step
        np.subtract(theta, self.theta0, out=coords[1])
        coords[1] *= 1.0 / self.theta_step
        re = ndimage.map_coordinates(
            self.coefficients_real, coords, order=3, prefilter=False, mode="nearest"
        )
        im = ndimage.map_coordinates(
            self.coefficients_imag, coords, order=3, prefilter=False, mode="nearest"
        )
        return re + 1j * im


@functools.lru_cache(maxsize=4)
def carson_correction_table(r_min=1e-4, r_max=1e3, points_per_decade=40, theta_steps=64):
    """Cached :class:`CarsonTable` (built on first use, ~0.1 s).

    Returns
    -------
    CarsonTable
        Table of J(r, θ) valid to ≲1e-6 relative in Z over its range.
    """
    return CarsonTable(r_min, r_max, points_per_decade, theta_steps)


def carson_correction_fast(r, theta_rad):
    """Tabulated J(r, θ) [-] from the default :func:`carson_correction_table`."""
    return carson_correction_table().evaluate(r, theta_rad)


def equivalent_earth_depth_m(soil_resistivity_ohm_m, frequency_hz):
    """Depth of the equivalent earth-return conductor De [m].

    Parameters
    ----------
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray
        De [m].

    Notes
    -----
    De = 2e^{1/2−γ}/√(ωμ0/ρ) = 658.87·√(ρ/f) (γ Euler's constant), from the
    constant term of Carson's series; textbooks round it to 658.9·√(ρ/f).

    References
    ----------
    .. [1] T. Gönen, Electric Power Transmission System Engineering.
    .. [2] J. R. Carson, Bell System Technical Journal 5, 1926.
    """
    rho = np.asarray(soil_resistivity_ohm_m, float)
    return EQUIVALENT_DEPTH_CONSTANT * np.sqrt(rho / np.asarray(frequency_hz, float))


def low_frequency_mutual_impedance(separation_m, soil_resistivity_ohm_m, frequency_hz):
    """Low-frequency (modified Carson) earth-return mutual impedance.

    Parameters
    ----------
    separation_m : array_like
        Direct distance d between the conductors (or GMR for self terms) [m].
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray of complex
        Impedance per unit length [Ω/m].

    Notes
    -----
    Z = ωμ0/8 + j(ωμ0/2π)·ln(De/d), De from :func:`equivalent_earth_depth_m`.
    At 50 Hz: 0.0493 + j0.1447·log10(De/d) Ω/km. Valid only while
    k = D·√(ωμ0/ρ) ≤ :data:`LOW_FREQUENCY_K_BOUND` (1 %); its reactance turns
    negative for d > De, where the exact integral stays positive.

    References
    ----------
    .. [1] T. Gönen, Electric Power Transmission System Engineering.
    .. [2] W. H. Kersting, Distribution System Modeling and Analysis, ch. 4.
    """
    w = _omega(frequency_hz)
    d = np.maximum(np.asarray(separation_m, float), MIN_SEPARATION_M)
    de = equivalent_earth_depth_m(soil_resistivity_ohm_m, frequency_hz)
    return w * MU0_H_PER_M / 8.0 + 1j * w * MU0_H_PER_M / (2 * np.pi) * np.log(de / d)


def _one_minus_z_k1_over_z2(z):
    """(1 − z·K1(z))/z², by series for |z| ≤ 1 and scipy.special.kv beyond."""
    z = np.asarray(z, dtype=complex)
    out = np.empty_like(z)
    small = np.abs(z) <= 1.0
    zs = z[small]
    if zs.size:
        # z·K1(z) = 1 + Σ_k (z²/4)^k/(k!(k+1)!)·(z²/2)[ln(z/2) − (ψ(k+1)+ψ(k+2))/2]
        q = 0.25 * zs * zs
        lg = np.log(0.5 * zs)
        acc = np.zeros_like(zs)
        term = np.ones_like(zs)
        for k in range(12):
            if k:
                term = term * q / (k * (k + 1))
            acc = acc + term * (lg - 0.5 * (special.digamma(k + 1) + special.digamma(k + 2)))
        out[small] = -0.5 * acc
    zl = z[~small]
    if zl.size:
        out[~small] = (1.0 - zl * special.kv(1, zl)) / (zl * zl)
    return out


def surface_mutual_impedance(separation_m, soil_resistivity_ohm_m, frequency_hz):
    """Mutual impedance of two earth-return conductors on the earth surface.

    Parameters
    ----------
    separation_m : array_like
        Horizontal distance a between the conductors [m] (> 0; floored at
        :data:`MIN_SEPARATION_M`).
    soil_resistivity_ohm_m : array_like
        Soil resistivity ρ [Ω·m].
    frequency_hz : array_like
        Frequency f [Hz].

    Returns
    -------
    ndarray of complex
        Mutual impedance per unit length [Ω/m].

    Notes
    -----
    Z(a) = ρ/(πa²)·[1 − γa·K₁(γa)], γ = √(jωμ0/ρ). Written as
    Z = (ρ/π)·γ²·(1 − zK₁(z))/z², z = γa, so small a needs no cancellation:
    a power series of zK₁(z) is used for |z| ≤ 1 (limit: the LF form
    ωμ0/8 + j(ωμ0/2π)ln(De/a)). Far field: Z → ρ/(πa²). Equals Carson's
    integral at hi = hj = 0.

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968.
    """
    a = np.maximum(np.asarray(separation_m, float), MIN_SEPARATION_M)
    rho = np.asarray(soil_resistivity_ohm_m, float)
    gamma2 = 1j * _omega(frequency_hz) * MU0_H_PER_M / rho
    a, rho, gamma2 = np.broadcast_arrays(a, rho, gamma2)
    z = np.sqrt(gamma2) * a
    with np.errstate(under="ignore"):
        return rho / np.pi * gamma2 * _one_minus_z_k1_over_z2(z)


# -- Two-layer earth ------------------------------------------------------------
#
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
        see :func:`_reference_is_bottom`.

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


def _reference_is_bottom(rho1, rho2, thickness_m, f):
    """Whether the homogeneous reference of a two-layer soil is the bottom layer.

    A top layer thinner than 1/m₁ = √(ρ₁/(ωμ0)) (about 0.7 skin depths) barely
    changes the earth-return path; the correction to the bottom-layer value
    is then small, and so is its interpolation error. Otherwise the top layer
    is the reference.
    """
    return thickness_m * np.sqrt(2.0 * np.pi * f * MU0_H_PER_M / rho1) < 1.0


def _two_layer_correction_ohm_per_m(big_d, theta, rho1, rho2, thickness_m, f):
    """jωμ0/π·ΔJ per point against the reference soil [Ω/m]; 0 where homogeneous."""
    big_d, theta, rho1, rho2, thickness_m, f = (
        a.ravel() for a in np.broadcast_arrays(big_d, theta, rho1, rho2, thickness_m, f))
    out = np.zeros(big_d.shape, complex)
    layered = (rho1 != rho2) & np.isfinite(thickness_m) & np.isfinite(rho2)
    if not layered.any():
        return out
    ref_bottom = _reference_is_bottom(rho1, rho2, thickness_m, f)
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


def _reference_resistivity(rho_top, rho2, t_top, f):
    """Resistivity of the homogeneous part: ρ₂ where :func:`_reference_is_bottom`, else ρ₁."""
    layered = (rho_top != rho2) & np.isfinite(t_top)
    with np.errstate(invalid="ignore"):
        bottom = layered & _reference_is_bottom(rho_top, rho2, np.where(layered, t_top, 1.0), f)
    return np.where(bottom, rho2, rho_top)


def _layer_arrays(rho, bottom_resistivity_ohm_m, top_thickness_m):
    rho2 = rho if bottom_resistivity_ohm_m is None else np.asarray(bottom_resistivity_ohm_m, float)
    t = np.inf if top_thickness_m is None else np.asarray(top_thickness_m, float)
    rho2 = np.where(np.isfinite(rho2), rho2, rho)
    if np.any(np.asarray(t) <= 0):
        raise ValueError("top_thickness_m: must be > 0")
    t = np.where(np.isfinite(t), t, np.inf)
    return rho2, t


# -- Production dispatcher ------------------------------------------------------


def _method_low_frequency(big_d, small_d, theta, m, w, rho, f):
    return low_frequency_mutual_impedance(small_d, rho, f)


def _method_surface(big_d, small_d, theta, m, w, rho, f):
    return surface_mutual_impedance(small_d, rho, f)


def _method_carson_table(big_d, small_d, theta, m, w, rho, f):
    jcar = carson_correction_fast(big_d * m, theta)
    return (1j * MU0_H_PER_M / (2 * np.pi)) * w * (np.log(big_d / small_d) + 2.0 * jcar)


#: Methods the dispatcher chooses from, by name.
MUTUAL_IMPEDANCE_METHODS = {
    "low_frequency": _method_low_frequency,
    "surface": _method_surface,
    "carson_table": _method_carson_table,
}


def mutual_impedance(
    height_i_m,
    height_j_m,
    horizontal_offset_m,
    soil_resistivity_ohm_m,
    frequency_hz,
    *,
    low_frequency_k_bound=LOW_FREQUENCY_K_BOUND,
    bottom_resistivity_ohm_m=None,
    top_thickness_m=None,
):
    """Production earth-return mutual impedance, choosing the method per pair.

    Parameters
    ----------
    height_i_m, height_j_m : array_like
        Heights above ground [m]; ≤ 0 (buried or surface) is taken as the
        surface (common practice for shallow buried assets).
    horizontal_offset_m : array_like
        Horizontal distance [m].
    soil_resistivity_ohm_m : array_like
        Soil resistivity [Ω·m]; with a two-layer soil, the top layer's ρ₁.
    frequency_hz : array_like
        Frequency [Hz].
    low_frequency_k_bound : float, optional
        Use the LF form where k = D·√(ωμ0/ρ) ≤ this (default
        :data:`LOW_FREQUENCY_K_BOUND`, the 1 % bound); pass 0 to use the
        exact forms everywhere.
    bottom_resistivity_ohm_m : array_like, optional
        Resistivity ρ₂ below the top layer [Ω·m]; None or NaN: homogeneous.
    top_thickness_m : array_like, optional
        Thickness t of the top layer [m]; None or NaN: homogeneous.

    Returns
    -------
    ndarray of complex
        Mutual impedance per unit length [Ω/m].

    Notes
    -----
    Per pair: k ≤ bound → ωμ0/8 + j(ωμ0/2π)ln(De/d); both heights ≤ 0 →
    Sunde's closed form ρ/(πa²)[1 − γaK₁(γa)]; otherwise Carson's integral
    from the cached table. The three are looked up by name
    (``low_frequency``, ``surface``, ``carson_table``) in
    :data:`MUTUAL_IMPEDANCE_METHODS`. A two-layer soil adds Sunde's layered
    correction jωμ0/π·ΔJ(D, θ) to the homogeneous value in ρ₁, from a cached
    per-soil :class:`_TwoLayerTable` (docs/methods.md §9).

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    hi = np.asarray(height_i_m, float)
    hj = np.asarray(height_j_m, float)
    big_d, small_d, theta = _geometry(hi, hj, horizontal_offset_m)
    rho_top = np.asarray(soil_resistivity_ohm_m, float)
    f = np.asarray(frequency_hz, float)
    rho2, t_top = _layer_arrays(rho_top, bottom_resistivity_ohm_m, top_thickness_m)
    # the homogeneous part uses the two-layer correction's reference soil
    rho = _reference_resistivity(rho_top, rho2, t_top, f)
    m = _wavenumber_per_m(rho, f)
    w = _omega(f)
    arrays = np.broadcast_arrays(big_d, small_d, theta, m, w, rho, f, hi, hj, rho2, t_top,
                                 rho_top)
    shape = arrays[0].shape
    big_d, small_d, theta, m, w, rho, f, hi, hj, rho2, t_top, rho_top = (
        a.ravel() for a in arrays)
    k = big_d * m
    # the low-frequency form's 1 % would add to the layered correction's error: exact
    # forms only under a two-layer soil
    layered = (rho2 != rho_top) & np.isfinite(t_top)
    choice = np.where(
        (k <= low_frequency_k_bound) & ~layered, 0, np.where((hi <= 0.0) & (hj <= 0.0), 1, 2)
    )
    out = np.empty(k.shape, dtype=complex)
    for code, name in enumerate(("low_frequency", "surface", "carson_table")):
        sel = choice == code
        if sel.all():
            out = MUTUAL_IMPEDANCE_METHODS[name](big_d, small_d, theta, m, w, rho, f)
            break
        if sel.any():
            out[sel] = MUTUAL_IMPEDANCE_METHODS[name](
                big_d[sel], small_d[sel], theta[sel], m[sel], w[sel], rho[sel], f[sel]
            )
    if bottom_resistivity_ohm_m is not None:
        out = out + _two_layer_correction_ohm_per_m(big_d, theta, rho_top, rho2, t_top, f)
    return out.reshape(shape)


def self_impedance(
    height_m, radius_or_gmr_m, internal_impedance_ohm_per_m, soil_resistivity_ohm_m, frequency_hz,
    *, bottom_resistivity_ohm_m=None, top_thickness_m=None,
):
    """Self impedance of an earth-return conductor [Ω/m].

    Parameters
    ----------
    height_m : array_like
        Height above ground [m]; ≤ 0 is taken as the surface.
    radius_or_gmr_m : array_like
        Outer radius (then pass the internal impedance) or the geometric
        mean radius (then pass the resistance only, the GMR already holds the
        internal reactance) [m].
    internal_impedance_ohm_per_m : array_like
        Internal impedance (or AC resistance with a GMR) [Ω/m].
    soil_resistivity_ohm_m, frequency_hz : array_like
        Soil resistivity [Ω·m] (two-layer soil: the top layer's), frequency [Hz].
    bottom_resistivity_ohm_m, top_thickness_m : array_like, optional
        Two-layer soil: ρ₂ [Ω·m] and the top layer's thickness [m] (see
        :func:`mutual_impedance`); None or NaN: homogeneous.

    Returns
    -------
    ndarray of complex
        Self impedance per unit length [Ω/m].

    Notes
    -----
    Overhead: Carson's integral with d → radius/GMR and D → 2h (via
    :func:`mutual_impedance` with x = 0, hi = hj = h), plus the internal term.
    Surface/buried: Sunde's surface form with a = radius. For a ≪ De it
    equals ωμ0/8 + j(ωμ0/2π)ln(De/a) (its small-argument limit), so the two
    choices agree; the closed form is kept because it stays exact for thick
    conductors in very low resistivity soil.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    h = np.asarray(height_m, float)
    a = np.asarray(radius_or_gmr_m, float)
    zint = np.asarray(internal_impedance_ohm_per_m, complex)
    rho_top = np.asarray(soil_resistivity_ohm_m, float)
    if bottom_resistivity_ohm_m is not None:
        rho2, t_top = _layer_arrays(rho_top, bottom_resistivity_ohm_m, top_thickness_m)
        rho_ref = _reference_resistivity(rho_top, rho2, t_top, np.asarray(frequency_hz, float))
    else:
        rho_ref = rho_top
    h, a, rho, f = np.broadcast_arrays(
        h, a, rho_ref, np.asarray(frequency_hz, float)
    )
    out = np.empty(h.shape, dtype=complex)
    above = h > 0
    if above.any():
        # d = GMR, D = 2h: give the dispatcher a vertical "pair" h ± GMR/2... exactly:
        hp = h[above]
        ap = a[above]
        big_d = 2 * hp
        m = _wavenumber_per_m(rho[above], f[above])
        k = big_d * m
        w = _omega(f[above])
        lf = k <= LOW_FREQUENCY_K_BOUND
        zz = np.empty(hp.shape, dtype=complex)
        zz[lf] = low_frequency_mutual_impedance(ap[lf], rho[above][lf], f[above][lf])
        nl = ~lf
        if nl.any():
            jcar = carson_correction_fast(k[nl], np.zeros(int(nl.sum())))
            zz[nl] = (1j * MU0_H_PER_M / (2 * np.pi)) * w[nl] * (
                np.log(big_d[nl] / ap[nl]) + 2.0 * jcar
            )
        out[above] = zz
    if (~above).any():
        out[~above] = surface_mutual_impedance(a[~above], rho[~above], f[~above])
    if bottom_resistivity_ohm_m is not None:
        big_d = np.where(above, 2.0 * np.maximum(h, 0.0), np.maximum(a, MIN_SEPARATION_M))
        theta = np.where(above, 0.0, 0.5 * np.pi)
        out = out + _two_layer_correction_ohm_per_m(big_d, theta, rho_top, rho2, t_top,
                                                    f).reshape(out.shape)
    return out + zint
