"""Worst case over unknown flow directions of lines whose phase angle is known.

A line that gives its phase-angle offset against the common reference but not its
flow direction contributes s·E with s = ±1 unknown. The worst normal-load EMF over
those signs is max over s of |G + Σ_k s_k E_k|, with G the phasor sum of the lines
whose direction and angle are both given. Taking each line as an unknown angle
instead gives the bound |G| + Σ_k |E_k|, conservative but loose: two such lines at
120° give |E1 + E2| or |E1 − E2|, never |E1| + |E2| (docs/methods.md §18.5).

The maximum is exact and costs O(n²) per segment for n such lines, with no
enumeration of the 2ⁿ sign vectors:

    max_s |G + Σ s_k E_k| = max_θ [Re(G e^{−jθ}) + Σ_k |Re(E_k e^{−jθ})|],

and at the optimum s_k = sign Re(E_k e^{−jθ*}) with θ* = arg of the optimal sum
(flipping a sign against that rule would raise Re(· e^{−jθ*}) above the maximum).
The sign pattern changes only where some Re(E_k e^{−jθ}) = 0, at θ = arg E_k ± π/2,
so the 2n patterns met between those breakpoints hold the optimum.
"""

from __future__ import annotations

import numpy as np


def worst_over_signs(fixed, entry_segment, entry_emf, n_segments) -> np.ndarray:
    """max over signs s_k = ±1 of |fixed + Σ_k s_k E_k| per segment.

    Parameters
    ----------
    fixed : array_like of complex, shape (n_segments,)
        The part whose direction is known, G [V].
    entry_segment : array_like of int, shape (n_entries,)
        Segment of each sign-unknown contribution.
    entry_emf : array_like of complex, shape (n_entries,)
        The contributions E_k [V], one per (segment, line).
    n_segments : int

    Returns
    -------
    ndarray of float, shape (n_segments,)
        The worst |EMF| per segment [V]; |fixed| where a segment has no entry.
    """
    g = np.asarray(fixed, complex)
    out = np.abs(g).astype(float)
    seg = np.asarray(entry_segment, np.int64)
    e = np.asarray(entry_emf, complex)
    if seg.size == 0:
        return out
    order = np.argsort(seg, kind="stable")
    seg, e = seg[order], e[order]
    starts = np.flatnonzero(np.r_[True, seg[1:] != seg[:-1]])
    counts = np.diff(np.r_[starts, len(seg)])
    # segments grouped by their number of entries: one vectorised pass per count
    for n in np.unique(counts):
        rows = starts[counts == n]
        block = e[rows[:, None] + np.arange(n)[None, :]]  # (m, n)
        s_id = seg[rows]
        # breakpoints θ = arg E_k ± π/2, and the midpoints of the arcs between them
        brk = np.concatenate([np.angle(block) + np.pi / 2, np.angle(block) - np.pi / 2], axis=1)
        brk = np.sort(np.mod(brk, 2 * np.pi), axis=1)
        nxt = np.concatenate([brk[:, 1:], brk[:, :1] + 2 * np.pi], axis=1)
        mids = 0.5 * (brk + nxt)  # (m, 2n)
        proj = np.real(block[:, None, :] * np.exp(-1j * mids)[:, :, None])  # (m, 2n, n)
        signs = np.where(proj >= 0, 1.0, -1.0)
        sums = g[s_id][:, None] + (signs * block[:, None, :]).sum(axis=2)
        out[s_id] = np.abs(sums).max(axis=1)
    return out
