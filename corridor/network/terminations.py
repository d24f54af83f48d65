"""Terminations of asset chain ends: admittance to earth from a termination label.

An end is ``"open"``, ``"grounded"`` (through a resistance) or
``"continuing"`` (the asset runs on beyond the data without a source, closed
by its characteristic admittance). Called through the kinds' entries in
:mod:`corridor.steps.respond`; the names are importable from
:mod:`corridor.network.asset_models` too.
"""

from __future__ import annotations

import numpy as np

from corridor.errors import InputError
from corridor.network.response import matched_termination_admittance

__all__ = [
    "TELECOM_GROUNDING_TERMINATIONS",
    "TERMINATION_MODELS",
    "termination_admittance",
]


def _open(z, y, r):
    return np.zeros(np.broadcast(z, y, r).shape, dtype=complex)


def _grounded(z, y, r):
    r = np.asarray(r, dtype=float)
    if np.any(r <= 0):
        raise InputError("termination_resistance_ohm: must be > 0 for a grounded end")
    return np.broadcast_to(1.0 / r + 0j, np.broadcast(z, y, r).shape).copy()


def _continuing(z, y, r):
    return np.broadcast_to(matched_termination_admittance(z, y),
                           np.broadcast(z, y, r).shape).copy()


#: How each termination label turns into an admittance to earth [S].
TERMINATION_MODELS = {"open": _open, "grounded": _grounded, "continuing": _continuing}


def termination_admittance(termination, z_ohm_per_m, y_s_per_m, resistance_ohm=np.inf):
    """Admittance to earth of chain ends from their termination labels.

    Parameters
    ----------
    termination : array_like of str
        ``"open"``, ``"grounded"`` or ``"continuing"`` per chain end.
    z_ohm_per_m, y_s_per_m : array_like of complex
        Line constants of the end segment [Ω/m], [S/m].
    resistance_ohm : array_like, optional
        Resistance to earth of grounded ends [Ω].

    Returns
    -------
    ndarray of complex
        0 (open), 1/R (grounded) or 1/Zc (continuing: the line runs on without
        source beyond the data) [S].
    """
    labels = np.asarray(termination)
    shape = np.broadcast(labels, z_ohm_per_m, y_s_per_m, resistance_ohm).shape
    unknown = ~np.isin(labels, list(TERMINATION_MODELS))
    if unknown.any():
        raise InputError(f"termination: unknown labels {sorted(set(labels[unknown].tolist()))}")
    out = np.zeros(shape, dtype=complex)
    labels = np.broadcast_to(labels, shape)
    z = np.broadcast_to(np.asarray(z_ohm_per_m, dtype=complex), shape)
    y = np.broadcast_to(np.asarray(y_s_per_m, dtype=complex), shape)
    r = np.broadcast_to(np.asarray(resistance_ohm, dtype=float), shape)
    for label, model in TERMINATION_MODELS.items():
        hit = labels == label
        if hit.any():
            out[hit] = model(z[hit], y[hit], r[hit])
    return out


#: Terminations of a telecom pair by where it is grounded.
TELECOM_GROUNDING_TERMINATIONS = {
    "one_end": ("grounded", "open"),
    "both_ends": ("grounded", "grounded"),
    "isolated": ("open", "open"),
}
