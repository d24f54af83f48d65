"""Row order checks of the merge and the run-wide tables, against plain definitions.

The merge and ``finalize`` skip their reorder when a table is already grouped by asset
in input order (:func:`corridor.ordering.in_asset_order`), and the assets layer takes
each asset's worst segment from a maximum per run
(:func:`corridor.steps.report_tables.worst_rows`). Each is checked here against the
definition it replaces, written out as a loop over the rows (common practice: a
brute-force reference).
"""

import numpy as np
import pandas as pd
import pytest

from corridor.ordering import in_asset_order, run_starts
from corridor.steps.report_tables import worst_rows


def _stable_sort_keeps_order(ids, order_of, within=None):
    """The definition: a stable sort by (asset position, within) moves no row."""
    pos = [order_of.get(a, len(order_of)) for a in ids]
    keys = list(zip(pos, within if within is not None else [0] * len(ids), strict=True))
    return sorted(range(len(ids)), key=lambda i: keys[i]) == list(range(len(ids))) and all(
        a in order_of for a in ids)


@pytest.mark.parametrize("dtype", ["str", object])
def test_in_asset_order_matches_the_sort_definition(dtype):
    rng = np.random.default_rng(5)
    known = ["a", "b", "c", "d"]
    for _ in range(2000):
        n = int(rng.integers(0, 9))
        ids = list(rng.choice(known + ["zz"], n, p=[0.24, 0.24, 0.24, 0.24, 0.04]))
        if rng.random() < 0.5:
            ids = sorted(ids, key=lambda a: known.index(a) if a in known else 9)
        within = rng.integers(0, 4, n)
        order_of = {a: i for i, a in enumerate(known)}
        series = pd.Series(ids, dtype=dtype)
        index = pd.Index(known)
        assert in_asset_order(series, index) == _stable_sort_keeps_order(ids, order_of)
        assert in_asset_order(series, index, within=within) == _stable_sort_keeps_order(
            ids, order_of, list(within))


@pytest.mark.parametrize("missing", [None, pd.NA, np.nan])
def test_missing_ids_are_runs_of_their_own_and_never_in_order(missing):
    s = pd.Series(["a", missing, missing, "b"], dtype=object)
    assert run_starts(s).tolist() == [0, 1, 2, 3]
    assert not in_asset_order(s, pd.Index(["a", "b"]))


def test_unsigned_and_missing_keys_within_an_asset():
    ids = pd.Series(["a", "a", "a"], dtype="str")
    # a decrease in an unsigned key is a decrease (a difference would wrap around)
    assert not in_asset_order(ids, pd.Index(["a"]), within=np.array([0, 2, 1], np.uint32))
    assert in_asset_order(ids, pd.Index(["a"]), within=np.array([0, 1, 1], np.uint32))
    assert not in_asset_order(ids, pd.Index(["a"]), within=np.array([0.0, np.nan, 1.0]))


def test_run_starts_of_text_with_missing_values():
    s = pd.Series(["x", "x", None, None, "y", "y", "x"], dtype="str")
    # a missing value starts a run of its own (it equals nothing, itself included)
    assert run_starts(s).tolist() == [0, 2, 3, 4, 6]
    assert run_starts(pd.Series([], dtype="str")).tolist() == []


def _worst_by_definition(a_idx, util, chainage, n):
    """Highest utilization (a missing one lowest), then lowest chainage, then first."""
    out = np.full(n, -1, np.int64)
    for asset in range(n):
        rows = [i for i in range(len(a_idx)) if a_idx[i] == asset]
        if not rows:
            continue
        # a missing utilization after every real one (-inf included)
        key = [(np.isnan(util[i]), -util[i] if not np.isnan(util[i]) else 0.0, chainage[i], i)
               for i in rows]
        out[asset] = min(key)[3]
    return out


def test_worst_rows_matches_the_definition_with_ties_missing_and_infinite_values():
    rng = np.random.default_rng(11)
    for trial in range(1500):
        n = int(rng.integers(1, 7))
        lengths = rng.integers(0, 6, n)
        a_idx = np.repeat(rng.permutation(n), lengths[:n]).astype(np.int64)
        if trial % 3 == 0:  # not grouped by asset: the general path
            a_idx = rng.permutation(a_idx)
        util = rng.choice([0.0, 0.3, 0.3, 1.2, np.nan, np.inf, -np.inf], len(a_idx))
        chainage = rng.choice([0.0, 10.0, 10.0, 25.0], len(a_idx))
        assert worst_rows(a_idx, util, chainage, n).tolist() == _worst_by_definition(
            a_idx, util, chainage, n).tolist()
