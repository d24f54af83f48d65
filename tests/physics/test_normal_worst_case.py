"""Normal load with unknown relative flow direction and phase angle (docs/methods.md §8).

References are closed forms: for phasors whose relative angles are unknown,
max over the angles of |Σ e^{jψ_k} E_k| = Σ |E_k| (the triangle inequality is
an equality when all are aligned); with the angles given, the phasor sum.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from corridor.physics import induction as ind

# A flat single-circuit 138 kV line (typical spacing, docs/methods.md §7, from memory):
# conductors at x = -4.5, 0, 4.5 m, 18 m high; one earth wire at 24 m.
X = np.array([-4.5, 0.0, 4.5, 0.0])
H = np.array([18.0, 18.0, 18.0, 24.0])
GMR = np.array([0.0088, 0.0088, 0.0088, 0.003])
RES = np.array([0.07, 0.07, 0.07, 2.0]) / 1000.0
P_IDX = [0, 1, 2]
S_IDX = [3]


def _line_emf(offsets_m, phasing="ABC", direction=1.0, offset_deg=0.0, x=X, load=400.0,
              pct=5.0):
    """Balanced and residual EMF per metre of the line on assets at ``offsets_m``."""
    cc = ind.circuit_phase_currents([load], [phasing], pct, direction, offset_deg)
    cases = np.vstack([cc.balanced_a, cc.residual_a])
    cur = ind.conductor_currents(x, H, GMR, RES, P_IDX, S_IDX, cases, [100.0], 50.0)
    z = ind.asset_mutual_impedance(x, H, offsets_m, -1.5, 100.0, 50.0)
    shape = (len(offsets_m),) + cur.normal_a.shape[1:]
    e = ind.emf_per_m(z, np.broadcast_to(cur.normal_a[0], shape))
    return e[:, 0], e[:, 1]


def test_two_lines_of_unknown_direction_and_angle_give_the_sum_of_magnitudes():
    # Closed form (docs/methods.md §8): max_ψ |E1 + e^{jψ}E2| = |E1| + |E2| per segment,
    # and max over the direction alone is max(|E1 + E2|, |E1 − E2|) ≤ that.
    off = np.array([20.0, 40.0, 80.0, 300.0])
    e1, r1 = _line_emf(off + 40.0)  # line 1 at 40 m on one side
    e2, r2 = _line_emf(off - 40.0)  # line 2 on the other side
    n = len(off)
    seg = np.r_[np.arange(n), np.arange(n)]
    line = np.r_[np.zeros(n, int), np.ones(n, int)]
    zero = np.zeros(2 * n, complex)
    worst = ind.worst_normal_emf(seg, line, line, np.r_[e1, e2], zero, n)
    np.testing.assert_allclose(worst.emf_v, np.abs(e1) + np.abs(e2), rtol=1e-12)
    # brute force over the relative angle, 3600 steps: the closed form is the maximum
    psi = np.linspace(0, 2 * np.pi, 3601)
    brute = np.abs(e1[:, None] + np.exp(1j * psi)[None, :] * e2[:, None]).max(axis=1)
    assert np.all(brute <= worst.emf_v * (1 + 1e-12))
    np.testing.assert_allclose(brute, worst.emf_v, rtol=1e-5)
    assert np.all(np.maximum(np.abs(e1 + e2), np.abs(e1 - e2)) <= worst.emf_v * (1 + 1e-12))


def test_given_relative_angle_gives_the_phasor_sum():
    # Both lines in one phase group: angles (here 30°, a Dy transformer shift) given.
    off = np.array([10.0, 60.0, 250.0])
    e1, _ = _line_emf(off + 40.0)
    e2, _ = _line_emf(off - 40.0, offset_deg=30.0)
    n = len(off)
    seg = np.r_[np.arange(n), np.arange(n)]
    line = np.r_[np.zeros(n, int), np.ones(n, int)]
    worst = ind.worst_normal_emf(seg, line, np.zeros(2 * n, int), np.r_[e1, e2],
                                  np.zeros(2 * n, complex), n)
    np.testing.assert_allclose(worst.emf_v, np.abs(e1 + e2), rtol=1e-12)


def test_phase_offset_and_direction_rotate_the_emf():
    # Linearity: the currents, and so the EMF, turn by the offset and flip with the direction.
    off = np.array([15.0, 90.0])
    e0, r0 = _line_emf(off)
    e1, r1 = _line_emf(off, direction=-1.0, offset_deg=30.0)
    np.testing.assert_allclose(e1, -np.exp(1j * np.pi / 6) * e0, rtol=1e-12)
    np.testing.assert_allclose(r1, -np.exp(1j * np.pi / 6) * r0, rtol=1e-12)


def test_residual_of_unknown_angle_adds_its_magnitude():
    # Closed form: max over the residual's angle of |E + e^{jψ}R| = |E| + |R|.
    e = np.array([3.0 + 1j, 0.5 - 2j])
    r = np.array([0.2 + 0.4j, 1.0 + 0j])
    worst = ind.worst_normal_emf([0, 1], [0, 0], [0, 0], e, r, 2)
    np.testing.assert_allclose(worst.emf_v, np.abs(e) + np.abs(r), rtol=1e-14)
    psi = np.linspace(0, 2 * np.pi, 7201)
    brute = np.abs(e[:, None] + np.exp(1j * psi) * r[:, None]).max(axis=1)
    np.testing.assert_allclose(brute, worst.emf_v, rtol=1e-6)


def test_outage_weights_carry_the_line_total():
    # One circuit out, the other carries the line's total (issue's 345 kV example: 2 × 400 A).
    w = ind.outage_weights([400.0, 400.0])
    np.testing.assert_array_equal(w, [[1, 1], [0, 2], [2, 0]])
    w3 = ind.outage_weights([300.0, 200.0, 100.0])
    load = np.array([300.0, 200.0, 100.0])
    np.testing.assert_allclose((w3 * load).sum(axis=1), 600.0)
    assert ind.outage_weights([500.0]).shape == (1, 1)


def test_outage_scenario_is_kept_when_worse():
    # A double circuit phased ABC / CBA cancels its field at a distance; with one circuit out
    # the other carries 800 A and the EMF rises (the issue measured 2.4 → 17.1 V/km).
    x = np.array([-5.0, 0.0, 5.0, -5.0, 0.0, 5.0, 0.0])
    h = np.array([30.0, 30.0, 30.0, 22.0, 22.0, 22.0, 38.0])
    gmr = np.r_[np.full(6, 0.0118), 0.003]
    res = np.r_[np.full(6, 0.06), 2.0] / 1000.0
    p, s = list(range(6)), [6]
    load = np.array([400.0, 400.0])
    cc = ind.circuit_phase_currents(load, ["ABC", "CBA"], 0.0)
    cur = ind.conductor_currents(x, h, gmr, res, p, s, cc.balanced_a, [100.0], 50.0)
    off = np.array([60.0, 200.0])
    z = ind.asset_mutual_impedance(x, h, off, -1.5, 100.0, 50.0)
    per_circuit = np.stack([ind.emf_per_m(z, np.broadcast_to(cur.normal_a[0, c], (2, 7)))
                            for c in range(2)], axis=1)  # (n_seg, n_circuit)
    w = ind.outage_weights(load)
    scen = per_circuit @ w.T  # (n_seg, n_scenarios)
    worst = ind.worst_normal_emf([0, 1], [0, 0], [0, 0], scen, np.zeros_like(scen), 2)
    expected = np.abs(scen).max(axis=1)
    np.testing.assert_allclose(worst.emf_v, expected, rtol=1e-12)
    assert np.all(np.abs(scen[:, 1:]).max(axis=1) > 2 * np.abs(scen[:, 0]))
    assert np.all(worst.governing_scenario >= 1)


@settings(max_examples=40, deadline=None)
@given(
    offsets=st.lists(st.floats(-600.0, 600.0).filter(lambda v: abs(v) > 2.0), min_size=1,
                     max_size=4),
    line2_shift=st.floats(-200.0, 200.0),
    cyclic=st.integers(0, 2),
    reverse=st.booleans(),
    load2=st.floats(50.0, 1500.0),
)
def test_reversing_or_relabelling_a_line_never_lowers_the_worst_case(offsets, line2_shift,
                                                                    cyclic, reverse, load2):
    # Property (issue 15): with direction and angle unknown, describing line 2 differently —
    # its vertex order reversed (the EMF's sign flips and the asset changes side in the line's
    # frame, so the same physical conductors read mirrored: x → −x) or its phases renamed
    # cyclically (A→B→C→A, a 120° shift) — never lowers any segment's worst case.
    off = np.asarray(offsets)
    e1, r1 = _line_emf(off)
    base2, rb2 = _line_emf(off + line2_shift, load=load2)
    phasing = ["ABC", "BCA", "CAB"][cyclic]
    if reverse:
        # same physical line digitised the other way: mirrored frame, opposite direction
        alt2, ra2 = _line_emf(-(off + line2_shift), phasing=phasing, x=-X, load=load2,
                              direction=1.0)
        alt2, ra2 = -alt2, -ra2
    else:
        alt2, ra2 = _line_emf(off + line2_shift, phasing=phasing, load=load2)
    n = len(off)
    seg = np.r_[np.arange(n), np.arange(n)]
    line = np.r_[np.zeros(n, int), np.ones(n, int)]
    w0 = ind.worst_normal_emf(seg, line, line, np.r_[e1, base2], np.r_[r1, rb2], n).emf_v
    w1 = ind.worst_normal_emf(seg, line, line, np.r_[e1, alt2], np.r_[r1, ra2], n).emf_v
    assert np.all(w1 >= w0 * (1 - 1e-9))
    assert np.all(w0 >= w1 * (1 - 1e-9))


def test_known_angle_and_direction_can_cancel():
    # With everything given, two opposite lines cancel: the phasor sum, not the worst case.
    e = np.array([1.0 + 1j, -(1.0 + 1j)])
    w = ind.worst_normal_emf([0, 0], [0, 1], [0, 0], e, np.zeros(2, complex), 1)
    assert w.emf_v[0] == pytest.approx(0.0, abs=1e-15)
    w = ind.worst_normal_emf([0, 0], [0, 1], [0, 1], e, np.zeros(2, complex), 1)
    assert w.emf_v[0] == pytest.approx(2 * np.sqrt(2))
