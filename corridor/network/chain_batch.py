"""Description of a batch of asset chains and the line constants of a uniform segment.

The layout and sign conventions of a :class:`ChainBatch` are those of
:mod:`corridor.network.response`, which assembles and solves it:

- segments of all chains are concatenated; ``chain_start[c]`` is the index of
  the first segment of chain ``c`` (chains contiguous and in order, each with
  at least one segment); a chain of ``n`` segments has ``n + 1`` nodes, so
  segment ``s`` of chain ``c`` runs from node ``s + c`` to node ``s + c + 1``;
- the EMF of a segment and its longitudinal current are positive in the chain
  direction; node voltages are to remote earth.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.errors import InputError

__all__ = ["ChainBatch", "matched_termination_admittance", "propagation_constant"]


# --------------------------------------------------------------------------
# Line constants
# --------------------------------------------------------------------------
def propagation_constant(z_ohm_per_m, y_s_per_m):
    """Propagation constant of a uniform earth-return line.

    Parameters
    ----------
    z_ohm_per_m : array_like of complex
        Series impedance per unit length [Ω/m].
    y_s_per_m : array_like of complex
        Shunt admittance per unit length [S/m].

    Returns
    -------
    ndarray of complex
        Propagation constant γ [1/m], the root with non-negative real part.

    Notes
    -----
    γ = √(z·y) (principal branch, Re γ ≥ 0).

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968, ch. on earth-return transmission lines.
    """
    z = np.asarray(z_ohm_per_m, dtype=complex)
    y = np.asarray(y_s_per_m, dtype=complex)
    return np.sqrt(z * y)


def matched_termination_admittance(z_ohm_per_m, y_s_per_m):
    """Admittance that terminates a line as if it continued without end.

    Parameters
    ----------
    z_ohm_per_m : array_like of complex
        Series impedance per unit length of the end segment [Ω/m].
    y_s_per_m : array_like of complex
        Shunt admittance per unit length of the end segment [S/m].

    Returns
    -------
    ndarray of complex
        1/Zc = √(y/z) [S]; 0 where ``y == 0`` (an unleaky line continuing
        without end draws no current).

    Notes
    -----
    The input admittance of a semi-infinite uniform line without source is
    1/Zc = γ/z.

    References
    ----------
    .. [1] E. D. Sunde, Earth Conduction Effects in Transmission Systems,
       Dover, 1968.
    """
    z = np.asarray(z_ohm_per_m, dtype=complex)
    return propagation_constant(z_ohm_per_m, y_s_per_m) / z


# --------------------------------------------------------------------------
# Batch description
# --------------------------------------------------------------------------
def _as_vector(value, n, dtype, name, problems, default=0):
    if value is None:
        return np.full(n, default, dtype=dtype)
    arr = np.asarray(value)
    if arr.ndim == 0:
        return np.full(n, arr, dtype=dtype)
    if arr.shape != (n,):
        problems.append(f"{name}: expected shape ({n},), got {arr.shape}")
        return np.full(n, default, dtype=dtype)
    return arr.astype(dtype, copy=False)


@dataclass(frozen=True)
class ChainBatch:
    """Many asset chains, stacked for one batched solve.

    Build with :meth:`from_arrays`, which broadcasts scalars and validates.

    Attributes
    ----------
    segment_length_m : ndarray of float, shape (n_segments,)
        Length of each segment [m].
    series_impedance_ohm_per_m : ndarray of complex, shape (n_segments,)
        Series (earth-return loop) impedance per unit length z [Ω/m].
    shunt_admittance_s_per_m : ndarray of complex, shape (n_segments,)
        Shunt admittance to earth per unit length y [S/m].
    chain_start : ndarray of int, shape (n_chains,)
        Index of the first segment of each chain (strictly increasing, first 0).
    node_shunt_admittance_s : ndarray of complex, shape (n_nodes,)
        Extra lumped admittance to remote earth at each node (grounds: 1/R) [S].
    segment_break : ndarray of bool, shape (n_segments,)
        True where the conductor is broken (insulating joint, gate, gap): the
        break sits at the segment's midpoint; each half stays connected to
        its end node as an open-ended stub with its share of the EMF.
    start_termination_admittance_s, end_termination_admittance_s : ndarray of complex
        Admittance to earth at the first / last node of each chain
        (open 0; grounded 1/R; continuing 1/Zc) [S], shape (n_chains,).
    """

    segment_length_m: np.ndarray
    series_impedance_ohm_per_m: np.ndarray
    shunt_admittance_s_per_m: np.ndarray
    chain_start: np.ndarray
    node_shunt_admittance_s: np.ndarray
    segment_break: np.ndarray
    start_termination_admittance_s: np.ndarray
    end_termination_admittance_s: np.ndarray

    @classmethod
    def from_arrays(
        cls,
        segment_length_m,
        series_impedance_ohm_per_m,
        shunt_admittance_s_per_m,
        chain_start,
        node_shunt_admittance_s=None,
        segment_break=None,
        start_termination_admittance_s=None,
        end_termination_admittance_s=None,
    ) -> ChainBatch:
        """Validate and broadcast the inputs (see the class attributes).

        Raises
        ------
        corridor.errors.InputError
            Listing every problem found.
        """
        problems: list[str] = []
        length = np.atleast_1d(np.asarray(segment_length_m, dtype=float))
        n_seg = length.shape[0]
        if length.ndim != 1 or n_seg == 0:
            raise InputError("segment_length_m: expected a non-empty 1-D array")
        starts = np.atleast_1d(np.asarray(chain_start))
        if starts.ndim != 1 or starts.size == 0 or not np.issubdtype(starts.dtype, np.integer):
            raise InputError("chain_start: expected a non-empty 1-D integer array")
        starts = starts.astype(np.int64)
        if starts[0] != 0:
            problems.append("chain_start: the first chain must start at segment 0")
        if np.any(np.diff(starts) <= 0) or starts[-1] >= n_seg:
            problems.append(
                "chain_start: must be strictly increasing and below the number of segments"
                " (every chain needs at least one segment)"
            )
        n_chain = starts.size
        n_node = n_seg + n_chain
        z = _as_vector(series_impedance_ohm_per_m, n_seg, complex,
                       "series_impedance_ohm_per_m", problems, default=1.0)
        y = _as_vector(shunt_admittance_s_per_m, n_seg, complex,
                       "shunt_admittance_s_per_m", problems)
        y_node = _as_vector(node_shunt_admittance_s, n_node, complex,
                            "node_shunt_admittance_s", problems)
        brk = _as_vector(segment_break, n_seg, bool, "segment_break", problems, default=False)
        y_start = _as_vector(start_termination_admittance_s, n_chain, complex,
                             "start_termination_admittance_s", problems)
        y_end = _as_vector(end_termination_admittance_s, n_chain, complex,
                           "end_termination_admittance_s", problems)
        bad = ~np.isfinite(length) | (length <= 0)
        if bad.any():
            problems.append(
                f"segment_length_m: must be finite and > 0 (segments {_ids(bad)})")
        bad = ~np.isfinite(z) | (z == 0)
        if bad.any():
            problems.append(
                f"series_impedance_ohm_per_m: must be finite and non-zero (segments {_ids(bad)})")
        for name, arr in (("shunt_admittance_s_per_m", y),
                          ("node_shunt_admittance_s", y_node),
                          ("start_termination_admittance_s", y_start),
                          ("end_termination_admittance_s", y_end)):
            bad = ~np.isfinite(arr)
            if bad.any():
                problems.append(f"{name}: must be finite (indices {_ids(bad)})")
        if problems:
            raise InputError(problems)
        return cls(length, z, y, starts, y_node, brk, y_start, y_end)

    # ---- layout helpers ---------------------------------------------------
    @property
    def n_segments(self) -> int:
        """Number of segments in the batch."""
        return int(self.segment_length_m.shape[0])

    @property
    def n_chains(self) -> int:
        """Number of chains in the batch."""
        return int(self.chain_start.shape[0])

    @property
    def n_nodes(self) -> int:
        """Number of nodes in the batch (segments + chains)."""
        return self.n_segments + self.n_chains

    @property
    def segment_chain(self) -> np.ndarray:
        """Chain index of every segment, shape (n_segments,)."""
        mark = np.zeros(self.n_segments, dtype=np.int64)
        mark[self.chain_start[1:]] = 1
        return np.cumsum(mark)

    @property
    def segment_start_node(self) -> np.ndarray:
        """Index of the first node of every segment, shape (n_segments,)."""
        return np.arange(self.n_segments) + self.segment_chain

    @property
    def chain_first_node(self) -> np.ndarray:
        """Index of the first node of every chain, shape (n_chains,)."""
        return self.chain_start + np.arange(self.n_chains)

    @property
    def chain_last_node(self) -> np.ndarray:
        """Index of the last node of every chain, shape (n_chains,)."""
        return np.append(self.chain_first_node[1:] - 1, self.n_nodes - 1)

    @property
    def node_chain(self) -> np.ndarray:
        """Chain index of every node, shape (n_nodes,)."""
        mark = np.zeros(self.n_nodes, dtype=np.int64)
        mark[self.chain_first_node[1:]] = 1
        return np.cumsum(mark)


def _ids(mask, limit=10):
    idx = np.flatnonzero(mask)
    text = ", ".join(str(i) for i in idx[:limit])
    return text + (f" … ({idx.size} in all)" if idx.size > limit else "")
