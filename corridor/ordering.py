"""Row order checks of per-asset tables (a segment table holds each asset's rows together).

A leaf module: numpy, pandas and pyarrow only, so that the merge, the run-wide
steps and the tables can use it without importing each other.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def run_starts(values) -> np.ndarray:
    """Positions where a run of equal consecutive values starts (0 first; empty for none).

    A missing value starts a run of its own. Arrow-backed strings are compared in
    Arrow, without a Python object per row.
    """
    n = len(values)
    if n == 0:
        return np.zeros(0, np.int64)
    array = values.array if isinstance(values, pd.Series) else values
    if isinstance(getattr(array, "dtype", None), pd.ArrowDtype | pd.StringDtype) and hasattr(
            array, "__arrow_array__"):
        import pyarrow as pa
        import pyarrow.compute as pc

        arrow = pa.chunked_array(array.__arrow_array__())
        differ = pc.fill_null(pc.not_equal(arrow[1:], arrow[:-1]), True)
        change = np.asarray(differ.to_numpy(zero_copy_only=False), bool)
    else:
        flat = np.asarray(array, dtype=object)
        missing = np.asarray(pd.isna(flat), bool)
        both = ~(missing[1:] | missing[:-1])  # compare only where neither is missing
        change = np.ones(n - 1, bool)
        change[both] = np.asarray(flat[1:][both] != flat[:-1][both], dtype=bool)
    return np.concatenate([[0], np.flatnonzero(change) + 1]).astype(np.int64)


def in_asset_order(asset_ids, ids: pd.Index, within=None) -> bool:
    """True when rows are already grouped by asset in the order of ``ids`` (each asset
    in one run of rows, no unknown id), and, with ``within``, not decreasing in it inside
    each run: then a stable sort by (asset position, ``within``) keeps every row where
    it is.

    Looks up only each run's first id, so a table in order costs one comparison per
    row instead of a hash lookup per row.
    """
    starts = run_starts(asset_ids)
    if len(starts) == 0:
        return True
    heads = asset_ids.iloc[starts] if isinstance(asset_ids, pd.Series) else asset_ids[starts]
    pos = ids.get_indexer(pd.Index(heads))
    if (pos < 0).any() or (len(pos) > 1 and not bool(np.all(np.diff(pos) > 0))):
        return False
    if within is None:
        return True
    w = np.asarray(within)
    keeps = w[1:] >= w[:-1]  # equal keys keep their order in a stable sort; NaN: False
    keeps[starts[1:] - 1] = True  # a new run may start anywhere
    return bool(np.all(keeps))
