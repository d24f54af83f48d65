"""Small array helpers the inductive-coupling modules share (package-internal)."""

from __future__ import annotations

import numpy as np

__all__ = ["PHASE_ANGLE_RAD", "complex_bincount"]

#: Angle of each phase's current in a balanced positive-sequence set [rad].
PHASE_ANGLE_RAD = {"A": 0.0, "B": -2.0 * np.pi / 3.0, "C": 2.0 * np.pi / 3.0}


def complex_bincount(index, values, n):
    """Sums of complex ``values`` per bin ``index`` (``numpy.bincount``), ``n`` bins."""
    return (np.bincount(index, weights=values.real, minlength=n)
            + 1j * np.bincount(index, weights=values.imag, minlength=n))
