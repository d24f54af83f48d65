"""Carson's earth-return integral J(r, θ): exact series forms and the cached table.

Symbols: ω = 2πf, m = √(ωμ0/ρ) [1/m], D = √(x² + (hi+hj)²), dimensionless
r = D·m and θ = atan(x/(hi+hj)). The Carson integral is written in
dimensionless form

    J(r, θ) = ∫₀^∞ e^{−u r cosθ} cos(u r sinθ) / (u + √(u² + j)) du

so that Z = jωμ0/(2π)·[ln(D/d) + 2J(r, θ)] (the impedances themselves are in
:mod:`corridor.physics.earth_return`).

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

from corridor.physics.constants import EULER_GAMMA

__all__ = [
    "CarsonTable",
    "carson_correction_dimensionless",
    "carson_correction_fast",
    "carson_correction_table",
]

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
