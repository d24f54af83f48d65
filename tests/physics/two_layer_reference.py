"""Independent mpmath quadrature of Sunde's two-layer earth-return integral.

Z = jωμ0/(2π)·[ln(D/d) + 2∫₀^∞ e^{−(h_i+h_j)λ} cos(λx)/(λ + Y) dλ],
Y = u₁(u₂ + u₁ tanh(u₁t))/(u₁ + u₂ tanh(u₁t)), u_i = √(λ² + jωμ0/ρ_i)
(E. D. Sunde, Earth Conduction Effects in Transmission Systems, 1968, layered
earth; docs/methods.md §9). Integrated along the real λ axis as written, with
mpmath's oscillatory quadrature: no part of the production decomposition
(homogeneous Carson + correction, rotated ray, table) is used.
"""

import mpmath as mp


def two_layer_mutual_impedance(height_i_m, height_j_m, horizontal_offset_m, rho1_ohm_m,
                               rho2_ohm_m, thickness_m, frequency_hz):
    """Mutual impedance per metre over two-layer earth [Ω/m] (heights ≤ 0: surface)."""
    w = 2 * mp.pi * frequency_hz
    mu0 = 4e-7 * mp.pi
    k1 = 1j * w * mu0 / rho1_ohm_m
    k2 = 1j * w * mu0 / rho2_ohm_m
    hi = max(float(height_i_m), 0.0)
    hj = max(float(height_j_m), 0.0)
    x = abs(float(horizontal_offset_m))
    big_h = hi + hj
    big_d = mp.sqrt(x * x + big_h * big_h)
    small_d = mp.sqrt(x * x + (hi - hj) ** 2)

    def kernel(lam):
        u1 = mp.sqrt(lam * lam + k1)
        u2 = mp.sqrt(lam * lam + k2)
        tt = mp.tanh(u1 * thickness_m)
        y = u1 * (u2 + u1 * tt) / (u1 + u2 * tt)
        return mp.exp(-big_h * lam) * mp.cos(lam * x) / (lam + y)

    scales = [float(abs(mp.sqrt(k1))), float(abs(mp.sqrt(k2))), 1.0 / thickness_m]
    if big_h > 0:
        # e^{−Hλ} < e^{−40} beyond 40/H: a finite range, cut at every period of cos(λx)
        # (mpmath's extrapolating quadosc misjudges such exponentially decaying tails)
        end = 40.0 / big_h
        periods = int(end * x / (2 * mp.pi))
        step = max(1, -(-periods // 150))  # at most ~150 pieces of whole periods
        points = sorted({0.0, end, *(v for v in scales if v < end),
                         *(float(2 * mp.pi * k / x) for k in range(step, periods + 1, step))})
        integral = mp.quad(kernel, points)
    else:
        # on the surface the kernel decays like cos(λx)/(2λ): piecewise over its structure,
        # then period by period with extrapolation
        end = 20.0 * max(scales)
        periods = int(end * x / (2 * mp.pi))
        if periods > 300:  # the kernel's structure spans many periods
            integral = mp.quadosc(kernel, [0, mp.inf], omega=x)
        else:
            points = sorted({0.0, end, *scales,
                             *(float(2 * mp.pi * k / x) for k in range(1, periods + 1))})
            integral = mp.quad(kernel, points)
            integral += (mp.quadosc(kernel, [end, mp.inf], omega=x) if x > 0
                         else mp.quad(kernel, [end, mp.inf]))
    return complex(1j * w * mu0 / (2 * mp.pi) * (mp.log(big_d / small_d) + 2 * integral))
