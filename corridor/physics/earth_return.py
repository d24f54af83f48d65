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
        Soil resistivity [Ω·m].
    frequency_hz : array_like
        Frequency [Hz].
    low_frequency_k_bound : float, optional
        Use the LF form where k = D·√(ωμ0/ρ) ≤ this (default
        :data:`LOW_FREQUENCY_K_BOUND`, the 1 % bound); pass 0 to use the
        exact forms everywhere.

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
    :data:`MUTUAL_IMPEDANCE_METHODS`.

    References
    ----------
    .. [1] J. R. Carson, Bell System Technical Journal 5, 1926.
    .. [2] E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968.
    """
    hi = np.asarray(height_i_m, float)
    hj = np.asarray(height_j_m, float)
    big_d, small_d, theta = _geometry(hi, hj, horizontal_offset_m)
    rho = np.asarray(soil_resistivity_ohm_m, float)
    f = np.asarray(frequency_hz, float)
    m = _wavenumber_per_m(rho, f)
    w = _omega(f)
    arrays = np.broadcast_arrays(big_d, small_d, theta, m, w, rho, f, hi, hj)
    shape = arrays[0].shape
    big_d, small_d, theta, m, w, rho, f, hi, hj = (a.ravel() for a in arrays)
    k = big_d * m
    choice = np.where(
        k <= low_frequency_k_bound, 0, np.where((hi <= 0.0) & (hj <= 0.0), 1, 2)
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
    return out.reshape(shape)


def self_impedance(
    height_m, radius_or_gmr_m, internal_impedance_ohm_per_m, soil_resistivity_ohm_m, frequency_hz
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
        Soil resistivity [Ω·m], frequency [Hz].

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
    h, a, rho, f = np.broadcast_arrays(
        h, a, np.asarray(soil_resistivity_ohm_m, float), np.asarray(frequency_hz, float)
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
    return out + zint
