"""How many digits a number gets in the CSV files, by the unit its column name carries.

Column names carry their unit as a suffix (``_m``, ``_v``, ``_a``, ``_ohm``, ...;
README "Outputs"). A CSV is read by people and spreadsheets, so a number gets the
digits its unit deserves for screening, no more:

- lengths and distances (``_m``): to 0.01 m; values under 1 m (radii, thicknesses)
  to 3 significant digits, so that they never round to 0;
- electrical quantities (volts, amperes, ohms, kV, kA, mA, V/km, A/m², Ω·m, ...),
  times (``_s``), frequencies and percentages: 3 significant digits;
- ratios (``utilization``, ``utilization_*``, ``ratio_*``, ``screening_factor``):
  3 significant digits;
- angles (``_deg``): to 0.1°;
- coordinates (``x``, ``y``, ``lon``, ``lat``): full precision (the shortest text
  that reads back as the same double), so a site is placed exactly where the
  layer has it;
- any other float column: 12 significant digits.

Screening inputs (soil resistivity, fault currents, clearing times) are rarely
known to better than a few per cent, so 3 significant digits keep every digit
that means something (common practice). Integers, booleans and text are never
changed. The GeoPackage layers keep full precision.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["Precision", "column_precision", "format_numbers", "round_array", "round_value"]


@dataclass(frozen=True)
class Precision:
    """A rounding rule: ``kind`` is ``"significant"``, ``"decimals"`` or ``"full"``.

    ``digits`` is the number of significant digits or of decimals; ``floor_sig``
    is the number of significant digits kept below 1 for a ``"decimals"`` rule
    (0: none).
    """

    kind: str
    digits: int = 0
    floor_sig: int = 0

    def describe(self) -> str:
        """The rule in words, for documentation and messages."""
        if self.kind == "full":
            return "full precision"
        if self.kind == "significant":
            return f"{self.digits} significant digits"
        text = f"{self.digits} decimals"
        if self.floor_sig:
            text += f" ({self.floor_sig} significant digits below 1)"
        return text


SIG3 = Precision("significant", 3)
FULL = Precision("full")
DEFAULT = Precision("significant", 12)
METRES = Precision("decimals", 2, floor_sig=3)
DEGREES = Precision("decimals", 1)

#: Unit suffix -> rule; the longest matching suffix wins (``_ohm_m`` before ``_m``).
SUFFIX_RULES: dict[str, Precision] = {
    "_v_per_km": SIG3, "_a_per_m2": SIG3, "_ohm_per_km": SIG3, "_ohm_km": SIG3,
    "_ohm_m2": SIG3, "_ohm_m": SIG3, "_ohm": SIG3, "_kv": SIG3, "_ka": SIG3, "_ma": SIG3,
    "_v": SIG3, "_a": SIG3, "_s": SIG3, "_hz": SIG3, "_pct": SIG3,
    "_deg": DEGREES, "_m": METRES,
}
#: Coordinates: full precision.
COORDINATE_COLUMNS = frozenset({"x", "y", "lon", "lat"})
#: Ratios without a unit suffix.
RATIO_COLUMNS = frozenset({"utilization", "worst_utilization", "screening_factor"})


def column_precision(column: str) -> Precision:
    """The rounding rule of a column, from its name.

    Parameters
    ----------
    column : str
        Column name (corridor's canonical names carry their unit as a suffix).

    Returns
    -------
    Precision
        Coordinates full, ratios 3 significant digits, else by the longest unit
        suffix the name ends with; 12 significant digits for other names.
    """
    name = column.lower()
    if name in COORDINATE_COLUMNS:
        return FULL
    if name in RATIO_COLUMNS or name.startswith(("ratio_", "utilization")):
        return SIG3
    for suffix in sorted(SUFFIX_RULES, key=len, reverse=True):
        if name.endswith(suffix) and len(name) > len(suffix):
            return SUFFIX_RULES[suffix]
    return DEFAULT


def round_value(value: float, rule: Precision) -> float:
    """One number rounded by a rule (NaN and infinities unchanged).

    The result is the double nearest to the rounded decimal, so ``repr`` of it
    is the short decimal text (``0.123``, never ``0.12300000000000001``).
    """
    return float(round_array(np.array([value], dtype=float), rule)[0])


def round_array(values: np.ndarray, rule: Precision) -> np.ndarray:
    """Many numbers rounded by a rule, as :func:`round_value` rounds one (vectorised).

    The rounded value is an integer times a power of ten, formed by one correctly
    rounded division or multiplication of two exact numbers, so it is the double
    nearest to the rounded decimal.
    """
    x = np.asarray(values, dtype=float)
    if rule.kind == "full":
        return x.copy()
    finite = np.isfinite(x) & (x != 0.0)
    mag = np.floor(np.log10(np.abs(np.where(finite, x, 1.0)))).astype(int)
    if rule.kind == "significant":
        k = rule.digits - 1 - mag  # decimals that keep `digits` significant digits
    else:
        k = np.full(x.shape, rule.digits)
        if rule.floor_sig:
            small = np.abs(x) < 1.0
            k = np.where(small, rule.floor_sig - 1 - mag, k)
    out = x.copy()
    # beyond 300 decimals (denormal-sized values) the scale overflows: left as they are
    pos = finite & (k >= 0) & (k <= 300)
    neg = finite & (k < 0) & (k >= -300)
    if pos.any():
        scale = 10.0 ** k[pos]
        out[pos] = np.rint(x[pos] * scale) / scale
    if neg.any():
        scale = 10.0 ** (-k[neg])
        out[neg] = np.rint(x[neg] / scale) * scale
    out[out == 0.0] = 0.0  # never "-0.0"
    return out


def format_numbers(values: pd.Series, column: str) -> pd.Series:
    """The CSV text of a float column, rounded by its unit's rule.

    Parameters
    ----------
    values : Series
        A float column.
    column : str
        Its name (chooses the rule, :func:`column_precision`).

    Returns
    -------
    Series of str
        One cell text per value (same index): the shortest decimal that reads
        back as the rounded double; missing values are empty.
    """
    rule = column_precision(column)
    arr = round_array(values.to_numpy(dtype=float, na_value=np.nan), rule)
    cells = np.array(list(map(repr, arr.tolist())), dtype=object)
    cells[np.isnan(arr)] = ""
    return pd.Series(cells, index=values.index, dtype=object)
