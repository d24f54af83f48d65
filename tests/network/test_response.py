"""Checks of the batched chain solver against transmission-line theory.

Closed forms: uniform EMF E [V/m] on a uniform earth-return line,
dV/dx = −zI + E, dI/dx = −yV (E. D. Sunde, Earth Conduction Effects in
Transmission Systems, Dover 1968).
"""

import mpmath
import numpy as np
import pytest

from corridor.errors import InputError
from corridor.network import response
from corridor.network.asset_models import (
    fence_line_constants,
    pipeline_line_constants,
    rail_line_constants,
)
from corridor.network.response import (
    ChainBatch,
    ChainSystem,
    matched_termination_admittance,
    propagation_constant,
)
from tests.network.chains import solve_chains

FREQ_HZ = 50.0
E_V_PER_M = 1.0 + 0.5j  # any complex EMF; the response is linear in it

# Pipeline-like constants: D = 0.5 m, 9.5 mm wall, r_coat = 1e4 Ω·m², 100 Ω·m soil.
PIPE = pipeline_line_constants(0.5, 0.0095, 1e4, -1.0, 100.0, FREQ_HZ)
# Leaky rail: 2 Ω·km ballast, wet end of the range [memory].
RAIL = rail_line_constants(2.0, 0.03, 100.0, FREQ_HZ)
# Metal-post fence: 4 wires, 3 m posts of 100 Ω — the leakiest kind, |γ|l ≈ 0.27 at 50 m.
FENCE = fence_line_constants(4, 1.25e-3, 3.0, 100.0, "metal", 1.5, 100.0, FREQ_HZ)


def characteristic_impedance(z, y):
    """Zc = √(z/y) (transmission-line theory; Sunde 1968)."""
    return np.sqrt(np.asarray(z, complex) / np.asarray(y, complex))
KINDS = {"pipeline": PIPE, "leaky_rail": RAIL, "metal_fence": FENCE}


def _open_line_v(x_m, length_m, z, y, e=E_V_PER_M):
    """Isolated line, open ends, uniform EMF (Sunde 1968)."""
    g = np.sqrt(z * y)
    return (e / g) * np.sinh(g * (x_m - length_m / 2)) / np.cosh(g * length_m / 2)


def _open_line_i(x_m, length_m, z, y, e=E_V_PER_M):
    """Current of the same line: I = (E − dV/dx)/z (from the line equations)."""
    g = np.sqrt(z * y)
    return (e / z) * (1 - np.cosh(g * (x_m - length_m / 2)) / np.cosh(g * length_m / 2))


def _uniform_chain(length_m, seg_m, z, y, **kw):
    n = int(round(length_m / seg_m))
    lengths = np.full(n, length_m / n)
    x = np.concatenate(([0.0], np.cumsum(lengths)))
    sol = solve_chains(lengths, z, y, E_V_PER_M * lengths, [0], **kw)
    return x, sol


@pytest.mark.parametrize("kind", list(KINDS))
def test_open_ends_uniform_emf_closed_form(kind):
    # Sunde closed form V(x) = (E/γ)·sinh(γ(x−L/2))/cosh(γL/2) (Sunde 1968).
    z, y = KINDS[kind]
    length_m = 10_000.0
    x, sol = _uniform_chain(length_m, 50.0, z, y)
    v_ref = _open_line_v(x, length_m, z, y)
    i_ref = _open_line_i(x, length_m, z, y)
    scale_v = np.abs(v_ref).max()
    # The brief asks 0.5 % at 50 m; the exact pi leaves only rounding, so
    # the check is far tighter (rtol 1e-9 of the peak).
    np.testing.assert_allclose(sol.node_voltage_v, v_ref, rtol=0, atol=1e-9 * scale_v)
    scale_i = np.abs(i_ref).max()
    np.testing.assert_allclose(sol.segment_current_start_a, i_ref[:-1], rtol=0,
                               atol=1e-9 * scale_i)
    np.testing.assert_allclose(sol.segment_current_end_a, i_ref[1:], rtol=0,
                               atol=1e-9 * scale_i)
    np.testing.assert_allclose(
        sol.segment_voltage_v, np.maximum(np.abs(v_ref[:-1]), np.abs(v_ref[1:])),
        rtol=0, atol=1e-9 * scale_v)


def test_long_segments_stay_exact():
    # Exact pi: even 2 km segments on the leaky rail (|γ|l ≈ 1.2) reproduce the
    # Sunde closed form at the nodes; rtol 1e-9 of the peak (rounding only).
    z, y = RAIL
    x, sol = _uniform_chain(20_000.0, 2_000.0, z, y)
    v_ref = _open_line_v(x, 20_000.0, z, y)
    np.testing.assert_allclose(sol.node_voltage_v, v_ref, rtol=0,
                               atol=1e-9 * np.abs(v_ref).max())


@pytest.mark.parametrize("kind", ["pipeline", "leaky_rail"])
def test_exposure_on_continuing_line_matched_ends(kind):
    # Exposure of length L on a line continuing both ways: end voltages
    # ±(E/2γ)(1 − e^{−γL}) (Sunde 1968). Matched ends are exact.
    z, y = KINDS[kind]
    length_m = 3_000.0
    g = propagation_constant(z, y)
    y_match = matched_termination_admittance(z, y)
    x, sol = _uniform_chain(length_m, 50.0, z, y, start_termination_admittance_s=y_match,
                            end_termination_admittance_s=y_match)
    v_end = E_V_PER_M / (2 * g) * (1 - np.exp(-g * length_m))
    np.testing.assert_allclose(sol.node_voltage_v[[0, -1]], [-v_end, v_end], rtol=1e-9)


@pytest.mark.parametrize("kind", ["pipeline", "leaky_rail"])
def test_exposure_in_middle_of_long_line(kind):
    # Same closed form, this time with the line physically continued 60 km each
    # way without EMF and left open: reflections come back attenuated by
    # e^{−2·Re(γ)·60 km} < 1e-10, so rtol 1e-6 is ample.
    z, y = KINDS[kind]
    seg_m, exposure_m, ext_m = 50.0, 3_000.0, 60_000.0
    n_ext, n_exp = int(ext_m / seg_m), int(exposure_m / seg_m)
    n = 2 * n_ext + n_exp
    emf = np.zeros(n, dtype=complex)
    emf[n_ext:n_ext + n_exp] = E_V_PER_M * seg_m
    sol = solve_chains(np.full(n, seg_m), z, y, emf, [0])
    g = propagation_constant(z, y)
    v_end = E_V_PER_M / (2 * g) * (1 - np.exp(-g * exposure_m))
    got = sol.node_voltage_v[[n_ext, n_ext + n_exp]]
    np.testing.assert_allclose(got, [-v_end, v_end], rtol=1e-6)


@pytest.mark.parametrize("kind", ["pipeline", "leaky_rail"])
def test_ground_at_peak_follows_thevenin(kind):
    z, y = KINDS[kind]
    length_m, seg_m = 8_000.0, 50.0
    n = int(length_m / seg_m)
    lengths = np.full(n, seg_m)
    emf = E_V_PER_M * lengths
    system = ChainSystem(ChainBatch.from_arrays(lengths, z, y, [0]))
    before = system.solve(emf)
    peak = system.peak_node(before.node_voltage_v)
    # Odd-symmetric profile: |V| peaks at both ends (equal up to rounding).
    assert peak.tolist() in ([0], [n])
    z_th = system.thevenin_impedance(peak)
    # Input impedance of an open-ended line of length L: Zc·coth(γL)
    # (transmission-line theory, Sunde ch. on earth-return lines).
    zc, g = characteristic_impedance(z, y), propagation_constant(z, y)
    np.testing.assert_allclose(z_th, zc / np.tanh(g * length_m), rtol=1e-9)
    # Thevenin's theorem: a ground R at the peak gives V·R/(R + Z_th); exact
    # for a linear network, so rtol 1e-9 (rounding).
    r_ohm = 2.0
    y_node = np.zeros(n + 1, dtype=complex)
    y_node[peak] = 1 / r_ohm
    after = solve_chains(lengths, z, y, emf, [0], node_shunt_admittance_s=y_node)
    expected = before.node_voltage_v[peak] * r_ohm / (r_ohm + z_th)
    np.testing.assert_allclose(after.node_voltage_v[peak], expected, rtol=1e-9)


def test_thevenin_mid_node_is_two_lines_in_parallel():
    # At an inner node the two open-ended sides are in parallel:
    # Z = Zc·coth(γa) ‖ Zc·coth(γb) (transmission-line theory). Several nodes
    # of one chain are asked at once (one solve column each).
    z, y = PIPE
    n, seg_m = 160, 50.0
    batch = ChainBatch.from_arrays(np.full(n, seg_m), z, y, [0])
    nodes = np.array([40, 100, 0])
    got = ChainSystem(batch).thevenin_impedance(nodes)
    zc, g = characteristic_impedance(z, y), propagation_constant(z, y)
    a, b = nodes * seg_m, (n - nodes) * seg_m
    y_a = np.where(a > 0, np.tanh(g * a) / zc, 0)
    y_b = np.tanh(g * b) / zc
    np.testing.assert_allclose(got, 1 / (y_a + y_b), rtol=1e-9)


def test_insulating_joint_splits_line():
    # An insulating joint makes two open-ended lines; each follows the Sunde
    # closed form with its own length (Sunde 1968), and both agree with
    # solving the halves as separate chains. The break sits mid-segment.
    z, y = PIPE
    seg_m, n, k = 50.0, 200, 79  # break in segment 79: at 79.5·50 = 3975 m
    lengths = np.full(n, seg_m)
    brk = np.zeros(n, dtype=bool)
    brk[k] = True
    emf = E_V_PER_M * lengths
    sol = solve_chains(lengths, z, y, emf, [0], segment_break=brk)
    x = np.arange(n + 1) * seg_m
    l1 = (k + 0.5) * seg_m
    l2 = n * seg_m - l1
    ref = np.where(x < l1, _open_line_v(x, l1, z, y), _open_line_v(x - l1, l2, z, y))
    np.testing.assert_allclose(sol.node_voltage_v, ref, rtol=0,
                               atol=1e-9 * np.abs(ref).max())  # exact pi: rounding only
    # Same halves as two chains in one batch, the break segment cut in two.
    halves = np.concatenate((lengths[:k], [seg_m / 2], [seg_m / 2], lengths[k + 1:]))
    sep = solve_chains(halves, z, y, E_V_PER_M * halves, [0, k + 1])
    v_sep = np.delete(sep.node_voltage_v, [k + 1, k + 2])  # drop the two break-point nodes
    np.testing.assert_allclose(sol.node_voltage_v, v_sep, rtol=0,
                               atol=1e-9 * np.abs(ref).max())
    # Stub currents at the break segment's ends equal those of the halves.
    np.testing.assert_allclose(sol.segment_current_start_a[k], sep.segment_current_start_a[k],
                               rtol=1e-9)
    np.testing.assert_allclose(sol.segment_current_end_a[k],
                               sep.segment_current_end_a[k + 1], rtol=1e-9)


def _crossing_emf(x_edges_m, e0=E_V_PER_M, x0_m=2_500.0, a_m=150.0):
    """Segment EMF of E(x) = e0/(1 + ((x − x0)/a)²), integrated exactly [V]."""
    prim = e0 * a_m * np.arctan((x_edges_m - x0_m) / a_m)
    return np.diff(prim)


@pytest.mark.parametrize("kind", list(KINDS))
def test_refinement_halving_segments(kind):
    # A sharply peaked EMF (a crossing, 150 m half-width): halving 50 m
    # segments changes node voltages by < 0.5 % of the peak (brief's bound).
    z, y = KINDS[kind]
    length_m = 6_000.0
    results = []
    for seg_m in (50.0, 25.0):
        n = int(length_m / seg_m)
        edges = np.arange(n + 1) * seg_m
        results.append(solve_chains(np.full(n, seg_m), z, y, _crossing_emf(edges), [0]))
    coarse, fine = results
    v_c, v_f = coarse.node_voltage_v, fine.node_voltage_v[::2]
    assert np.abs(v_c - v_f).max() <= 5e-3 * np.abs(v_f).max()
    i_c, i_f = coarse.segment_current_start_a, fine.segment_current_start_a[::2]
    assert np.abs(i_c - i_f).max() <= 5e-3 * np.abs(i_f).max()


def test_conservation_leakage_equals_current_change():
    # Charge conservation dI/dx = −yV: the current lost along each segment
    # equals y·∫V dx, with ∫V dx from the Sunde closed form:
    # ∫V dx = (E/γ²)·[cosh(γ(x−L/2))]/cosh(γL/2). rtol 1e-8: rounding only.
    z, y = RAIL
    length_m = 5_000.0
    x, sol = _uniform_chain(length_m, 50.0, z, y)
    g = np.sqrt(z * y)
    prim = E_V_PER_M / g**2 * np.cosh(g * (x - length_m / 2)) / np.cosh(g * length_m / 2)
    leak_ref = y * np.diff(prim)
    leak = sol.segment_current_start_a - sol.segment_current_end_a
    np.testing.assert_allclose(leak, leak_ref, rtol=0, atol=1e-8 * np.abs(leak_ref).max())


def test_conservation_kcl_with_grounds_and_terminations():
    # Kirchhoff's current law at each node and for the whole conductor:
    # current arriving along the line − current leaving = current to earth
    # through lumped grounds and terminations; segment leakage plus node
    # currents to earth sum to zero (the EMF sources are internal).
    z, y = PIPE
    n, seg_m = 120, 50.0
    lengths = np.full(n, seg_m)
    rng = np.random.default_rng(1)
    emf = (rng.normal(size=n) + 1j * rng.normal(size=n)) * seg_m
    y_node = np.zeros(n + 1, dtype=complex)
    y_node[[10, 37, 90]] = 1 / np.array([1.0, 5.0, 0.5])
    y_start, y_end = 1 / 3.0, matched_termination_admittance(z, y)
    sol = solve_chains(lengths, z, y, emf, [0], node_shunt_admittance_s=y_node,
                       start_termination_admittance_s=y_start, end_termination_admittance_s=y_end)
    v = sol.node_voltage_v
    to_earth = y_node * v
    to_earth[0] += y_start * v[0]
    to_earth[-1] += y_end * v[-1]
    arriving = np.concatenate(([0], sol.segment_current_end_a))
    leaving = np.concatenate((sol.segment_current_start_a, [0]))
    scale = np.abs(sol.segment_current_a).max()
    np.testing.assert_allclose(arriving - leaving, to_earth, rtol=0, atol=1e-9 * scale)
    leak = sol.segment_current_start_a - sol.segment_current_end_a
    assert abs(leak.sum() + to_earth.sum()) <= 1e-9 * scale


def test_short_isolated_fence_tiny_shunt():
    # A short fence with its wires on insulators (post resistance infinite), open both
    # ends, only jωC (≈ 7 pF/m) to earth: γL → 0 and the Sunde closed form tends to
    # V_end = E·L/2 (the line floats at the mid-point potential). The next term is
    # (γL)²/12 ≈ 1e-9 here, so rtol 1e-6.
    z, y = fence_line_constants(4, 1.25e-3, 3.0, np.inf, "wood", 1.5, 100.0, FREQ_HZ)
    length_m = 200.0
    _, sol = _uniform_chain(length_m, 50.0, z, y)
    half = E_V_PER_M * length_m / 2
    np.testing.assert_allclose(sol.node_voltage_v[[0, -1]], [-half, half], rtol=1e-6)


def test_batched_equals_individual_solves():
    # Stacking chains must not couple them: the batched answer equals each
    # chain solved alone (rtol 1e-10, rounding only). Mixed kinds, breaks,
    # grounds, terminations and two EMF cases.
    rng = np.random.default_rng(7)
    kinds = [PIPE, RAIL, FENCE, PIPE, RAIL]
    chains = []
    for i, (z, y) in enumerate(kinds):
        n = int(rng.integers(1, 60))
        lengths = rng.uniform(10.0, 80.0, n)
        emf = (rng.normal(size=(n, 2)) + 1j * rng.normal(size=(n, 2))) * lengths[:, None]
        brk = np.zeros(n, dtype=bool)
        if n > 4 and i % 2 == 0:
            brk[n // 2] = True
        y_node = np.where(rng.random(n + 1) < 0.1, 1 / rng.uniform(1, 20, n + 1), 0)
        y_s = [0.0, 0.1, matched_termination_admittance(z, y)][i % 3]
        y_e = [matched_termination_admittance(z, y), 0.0, 0.2][i % 3]
        chains.append(dict(lengths=lengths, z=np.full(n, z), y=np.full(n, y), emf=emf,
                           brk=brk, y_node=y_node, y_s=y_s, y_e=y_e))

    def cat(key):
        return np.concatenate([c[key] for c in chains])

    starts = np.cumsum([0] + [c["lengths"].size for c in chains])[:-1]
    batched = solve_chains(cat("lengths"), cat("z"), cat("y"), cat("emf"), starts,
                           node_shunt_admittance_s=cat("y_node"), segment_break=cat("brk"),
                           start_termination_admittance_s=[c["y_s"] for c in chains],
                           end_termination_admittance_s=[c["y_e"] for c in chains])
    alone = [solve_chains(c["lengths"], c["z"], c["y"], c["emf"], [0],
                          node_shunt_admittance_s=c["y_node"], segment_break=c["brk"],
                          start_termination_admittance_s=c["y_s"],
                          end_termination_admittance_s=c["y_e"]) for c in chains]
    for field in ("node_voltage_v", "segment_current_start_a", "segment_current_end_a",
                  "segment_voltage_v", "segment_current_a"):
        ref = np.concatenate([getattr(a, field) for a in alone])
        np.testing.assert_allclose(getattr(batched, field), ref, rtol=1e-10, atol=1e-12)
    # And each EMF case equals a single-case solve.
    one = solve_chains(chains[0]["lengths"], chains[0]["z"], chains[0]["y"],
                       chains[0]["emf"][:, 1], [0], node_shunt_admittance_s=chains[0]["y_node"],
                       segment_break=chains[0]["brk"],
                       start_termination_admittance_s=chains[0]["y_s"],
                       end_termination_admittance_s=chains[0]["y_e"])
    np.testing.assert_allclose(one.node_voltage_v, alone[0].node_voltage_v[:, 1], rtol=1e-12)


def test_peak_node_per_chain():
    z, y = PIPE
    lengths = np.full(10, 50.0)
    emf = np.zeros(10, dtype=complex)
    emf[:3] = 50.0  # EMF on the first part only: |V| peaks at node 0
    system = ChainSystem(ChainBatch.from_arrays(np.tile(lengths, 2), z, y, [0, 10]))
    sol = system.solve(np.concatenate((emf, -emf[::-1])))
    peaks = system.peak_node(sol.node_voltage_v)
    mag = np.abs(sol.node_voltage_v)
    assert peaks.tolist() == [int(np.argmax(mag[:11])), 11 + int(np.argmax(mag[11:]))]


@pytest.mark.parametrize("u", [0.0, 1e-7, 9.99e-5, 1.001e-4, 3e-3, 0.0316 + 0.0002j,
                               0.03163 + 0.001j, 0.3 + 0.2j, 2 + 1j, 40 + 3j])
def test_hyperbolic_ratios_against_mpmath(u):
    # Reference: mpmath at 30 digits. rtol 1e-13: both sides of each series
    # switch (|u²| = 1e-3 for the pi, |u| = 1e-4 for the break stub) must be
    # accurate to near double precision.
    u_c = complex(u)
    mp_u = mpmath.mpc(u_c)
    with mpmath.workdps(30):
        if u_c == 0:
            refs = (1.0, 1.0, 0.5)
        else:
            w = mp_u / 2
            refs = (complex(mp_u / mpmath.sinh(mp_u)), complex(mpmath.tanh(w) / w),
                    complex((1 - mpmath.sech(w)) / w**2))
    arr = np.array([u_c])
    u_over_sinh, tanh_ratio = response._even_ratios(arr * arr)
    got = (u_over_sinh[0], tanh_ratio[0], response._one_minus_sech_over_w2(arr / 2)[0])
    np.testing.assert_allclose(got, refs, rtol=1e-13)


def test_floating_chain_is_refused():
    # y = 0 everywhere and no ground: the potential is undefined.
    with pytest.raises(InputError, match="no path to earth"):
        solve_chains(np.full(5, 50.0), 1e-3 + 1e-3j, 0.0, np.ones(5), [0])
    # A break that leaves one side floating is refused too, naming chain 1.
    brk = np.zeros(8, dtype=bool)
    brk[6] = True
    y_node = np.zeros(10, dtype=complex)
    y_node[[0, 5]] = 0.1
    with pytest.raises(InputError, match="chains 1"):
        solve_chains(np.full(8, 50.0), 1e-3 + 1e-3j, 0.0, np.ones(8), [0, 3],
                     node_shunt_admittance_s=y_node, segment_break=brk)


def test_input_validation_reports_all_problems():
    with pytest.raises(InputError) as info:
        solve_chains(np.array([50.0, -1.0, 50.0]), [1e-3, 0.0, 1e-3], 1e-4, np.ones(3), [0, 2],
                     node_shunt_admittance_s=np.zeros(4))
    text = str(info.value)
    assert "segment_length_m" in text
    assert "series_impedance_ohm_per_m" in text
    assert "node_shunt_admittance_s" in text
