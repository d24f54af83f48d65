"""Reading and checking a load time series (CSV or Parquet).

Columns (canonical names; ``circuit``, ``phase_offset_deg`` and
``flow_direction`` optional):

``timestamp``
    ISO 8601 date and time; a time without a zone is taken as UTC.
``line_id``
    A power line of the run (``line_id`` of the power-line layer).
``circuit``
    Circuit number on the line, from 1; empty or absent: every circuit of the
    line carries ``current_a`` (as ``load_current_a`` in the layer).
``current_a``
    rms load current of the circuit [A], finite and ≥ 0.
``phase_offset_deg``
    Phase angle of the circuit's phase A against the common reference [deg];
    empty: the layer's value.
``flow_direction``
    +1 along the line's digitised direction, −1 against; empty: the layer's.

Every row is used or listed: a row with a bad value, an unknown line id, a
duplicate or a time earlier than the row before it for the same circuit is
rejected and listed (file, row, field, reason). The time axis is a regular
grid (the most common step between timestamps); a row off the grid is
rejected; a step with no value for a circuit (a gap) takes the largest
current of that circuit in the series, conservative, and is listed too.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from corridor.errors import InputError

log = logging.getLogger(__name__)

__all__ = ["LoadSeries", "read_load_series", "REQUIRED_COLUMNS", "OPTIONAL_COLUMNS"]

REQUIRED_COLUMNS = ("timestamp", "line_id", "current_a")
OPTIONAL_COLUMNS = ("circuit", "phase_offset_deg", "flow_direction")
#: Problems logged one by one at most (the rest are counted).
MAX_LISTED = 200
#: Problems kept for run.json and the report at most (then one line with the count).
MAX_KEPT = 1000


@dataclass
class LoadSeries:
    """A checked load series on a regular time grid.

    Attributes
    ----------
    times : ndarray of datetime64[s], shape (n_steps,)
        UTC time of each step.
    step_h : float
        Time step [h].
    keys : list of (str, int)
        (line_id, circuit) of each row of the matrices; circuit 0: every
        circuit of the line.
    current_a : ndarray, shape (n_keys, n_steps)
        rms current [A].
    phase_offset_deg, flow_direction : ndarray, shape (n_keys, n_steps)
        NaN where the layer's value applies.
    problems : list of dict
        ``file``, ``row``, ``field``, ``reason``, ``action`` (``rejected``,
        ``filled`` or ``note``) of every problem found.
    rows_read, rows_used : int
    """

    times: np.ndarray
    step_h: float
    keys: list[tuple[str, int]]
    current_a: np.ndarray
    phase_offset_deg: np.ndarray
    flow_direction: np.ndarray
    problems: list[dict] = field(default_factory=list)
    rows_read: int = 0
    rows_used: int = 0

    @property
    def n_steps(self) -> int:
        """Number of time steps."""
        return int(self.times.shape[0])

    def time_text(self, index) -> np.ndarray:
        """ISO 8601 UTC text of the steps ``index`` (empty where index < 0)."""
        idx = np.asarray(index, np.int64)
        text = np.datetime_as_string(self.times[np.maximum(idx, 0)], unit="s")
        return np.where(idx >= 0, np.char.add(text.astype(str), "Z"), "")


def _iso(t_ns) -> str:
    """ISO 8601 UTC text of a time in ns since the epoch (int or datetime64[ns])."""
    return str(np.datetime_as_string(np.datetime64(int(np.int64(t_ns)), "ns"), unit="s")) + "Z"


def _read_frame(path, file_format) -> pd.DataFrame:
    try:
        if file_format == "parquet":
            frame = pd.read_parquet(path)
            return frame.astype(object).where(frame.notna(), None)
        return pd.read_csv(path, dtype=str, keep_default_na=False, skipinitialspace=True)
    except Exception as exc:  # the file is the user's: any reader error is bad input
        raise InputError(f"load series {path}: cannot read the file: {exc}") from None


def _text(values) -> np.ndarray:
    """Stripped text of every cell; empty where the cell is empty or missing."""
    text = pd.Series(values, dtype=object).astype("string")
    return text.fillna("").str.strip().to_numpy(dtype=object)


def _numbers(text: np.ndarray) -> np.ndarray:
    return pd.to_numeric(pd.Series(text, dtype=object).replace("", np.nan),
                         errors="coerce").to_numpy(float)


def read_load_series(settings, line_circuits: dict[str, int]) -> LoadSeries:
    """Read, check and grid the series named by ``settings``.

    Parameters
    ----------
    settings : corridor.series.settings.SeriesSettings
    line_circuits : dict
        line_id -> number of circuits, of the power lines the run screens.

    Returns
    -------
    LoadSeries

    Raises
    ------
    corridor.errors.InputError
        A required column is missing, or no row is usable; the message names
        the file.
    """
    path = settings.path
    name = path.name
    frame = _read_frame(path, settings.file_format)
    frame.columns = [str(c).strip() for c in frame.columns]
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        raise InputError(f"load series {name}: missing column(s) {', '.join(missing)}"
                         f" (required: {', '.join(REQUIRED_COLUMNS)}; optional:"
                         f" {', '.join(OPTIONAL_COLUMNS)})")
    n = len(frame)
    problems: list[dict] = []
    csv = settings.file_format == "csv"

    def row_label(i: int) -> str:
        return f"row {i + 1}" + (f" (line {i + 2} of the file)" if csv else "")

    def add(i, fld, reason, action="rejected"):
        problems.append({"file": name, "row": row_label(int(i)) if i >= 0 else "",
                         "field": fld, "reason": reason, "action": action})

    ok = np.ones(n, bool)
    stamp_text = _text(frame["timestamp"])
    stamps = pd.to_datetime(pd.Series(stamp_text).replace("", None), errors="coerce",
                            utc=True, format="ISO8601")
    bad = stamps.isna().to_numpy()
    for i in np.flatnonzero(bad):
        add(i, "timestamp", f"{stamp_text[i]!r} is not an ISO 8601 date and time")
    ok &= ~bad
    ids = _text(frame["line_id"])
    nc_of = pd.Series(ids, dtype=object).map(line_circuits).to_numpy(float)  # NaN: unknown
    for i in np.flatnonzero(ok & np.isnan(nc_of)):
        add(i, "line_id", "empty" if ids[i] == "" else
            f"{ids[i]!r} is not among the screened power lines")
    ok &= ~np.isnan(nc_of)
    circuit = np.zeros(n, np.int64)
    if "circuit" in frame.columns:
        ctext = _text(frame["circuit"])
        cnum = _numbers(ctext)
        given = ok & (ctext != "")
        good = np.isfinite(cnum) & (cnum == np.round(cnum)) & (cnum >= 1) & (cnum <= nc_of)
        for i in np.flatnonzero(given & ~good):
            nc = int(nc_of[i])
            add(i, "circuit", f"{ctext[i]!r}: expected a whole number from 1 to {nc}"
                f" (line {ids[i]!r} has {nc} circuit{'s' if nc > 1 else ''})")
        ok &= ~(given & ~good)
        circuit = np.where(given & good, np.nan_to_num(cnum), 0).astype(np.int64)
    itext = _text(frame["current_a"])
    current = _numbers(itext)
    for i in np.flatnonzero(ok & ~np.isfinite(current)):
        add(i, "current_a", f"{itext[i]!r} is not a finite number")
    ok &= np.isfinite(current)
    for i in np.flatnonzero(ok & (current < 0)):
        add(i, "current_a", f"{current[i]:g} A is negative (a current is an rms value;"
            " give the direction in flow_direction)")
    ok &= ~(current < 0)
    offset = np.full(n, np.nan)
    direction = np.full(n, np.nan)
    for col, target in (("phase_offset_deg", offset), ("flow_direction", direction)):
        if col not in frame.columns:
            continue
        text = _text(frame[col])
        values = _numbers(text)
        given = ok & (text != "")
        good = np.isfinite(values) if col == "phase_offset_deg" else np.isin(values, (1.0, -1.0))
        for i in np.flatnonzero(given & ~good):
            add(i, col, f"{text[i]!r}: expected "
                + ("a finite angle in degrees" if col == "phase_offset_deg" else "+1 or -1"))
        ok &= ~(given & ~good)
        target[given & good] = values[given & good]
    # order within each circuit: strictly increasing time in file order. A row at or before
    # the latest earlier time of its circuit is rejected (the rejected rows never raise it).
    t_all = stamps.to_numpy(dtype="datetime64[ns]").astype("int64", copy=False) if n else \
        np.zeros(0, np.int64)
    key_codes, key_uniques = pd.factorize(pd.Series(ids, dtype=object) + "\x1f"
                                          + pd.Series(circuit).astype(str))
    rows_ok = np.flatnonzero(ok)
    marks_grid = ~bad
    if rows_ok.size:
        k_ok, t_ok = key_codes[rows_ok], t_all[rows_ok]
        order = np.argsort(k_ok, kind="stable")  # file order within each circuit
        ks, ts = k_ok[order], t_ok[order]
        running = pd.Series(ts).groupby(ks).cummax().to_numpy(np.int64)
        first = np.r_[True, ks[1:] != ks[:-1]]
        prev = np.r_[np.int64(0), running[:-1]]
        back = np.zeros(rows_ok.size, bool)
        back[order] = ~first & (ts <= prev)
        for r in np.flatnonzero(back):
            row = int(rows_ok[r])
            same = rows_ok[:r][key_codes[rows_ok[:r]] == key_codes[row]]
            m_row = int(same[np.argmax(t_all[same])])
            what = "duplicate timestamp" if t_all[row] == t_all[m_row] else "time goes backwards"
            add(row, "timestamp", f"{what}: {stamp_text[row]} is not after"
                f" {row_label(m_row)} of the same line and circuit")
        ok[rows_ok[back]] = False
        marks_grid[rows_ok[back]] = False
    t_ns = np.where(ok, t_all, 0)
    used = np.flatnonzero(ok)
    if used.size == 0:
        raise InputError([f"load series {name}: no usable row ({n} read)"]
                         + [f"{p['row']}: {p['field']}: {p['reason']}"
                            for p in problems[:MAX_LISTED]])
    # regular grid: the most common step between the distinct times of every row with a
    # readable timestamp (a row rejected for another field still marks its step)
    all_ns = stamps.to_numpy(dtype="datetime64[ns]")[marks_grid].astype("int64", copy=False)
    times = np.unique(all_ns)
    if times.size > 1:
        diffs, counts = np.unique(np.diff(times), return_counts=True)
        step = int(diffs[np.argmax(counts)])
    else:
        step = 3_600_000_000_000  # one hour, for a one-step series
    t0 = int(times[0])
    off_grid = (t_ns[used] - t0) % step != 0
    for i in used[off_grid]:
        add(i, "timestamp", f"{stamp_text[i]} is off the series' regular"
            f" {step / 3.6e12:g} h grid starting {_iso(t0)}")
        ok[i] = False
    used = used[~off_grid]
    n_steps = int((int(times[-1]) - t0) // step) + 1
    if not used.size:
        raise InputError(f"load series {name}: no row on the regular grid")
    step_of = ((t_ns[used] - t0) // step).astype(np.int64)
    kcodes, kuniq = pd.factorize(pd.Series(key_codes[used]))
    n_keys = len(kuniq)
    keys = []
    for code in kuniq:
        line_text, circuit_text = str(key_uniques[int(code)]).split("\x1f")
        keys.append((line_text, int(circuit_text)))
    cur = np.full((n_keys, n_steps), np.nan)
    off_m = np.full((n_keys, n_steps), np.nan)
    dir_m = np.full((n_keys, n_steps), np.nan)
    cur[kcodes, step_of] = current[used]
    off_m[kcodes, step_of] = offset[used]
    dir_m[kcodes, step_of] = direction[used]
    grid = (t0 + np.arange(n_steps, dtype=np.int64) * step).astype("datetime64[ns]")
    for k in range(n_keys):
        gap = np.isnan(cur[k])
        if not gap.any():
            continue
        fill = float(np.nanmax(cur[k]))
        cur[k, gap] = fill
        starts = np.flatnonzero(gap & ~np.r_[False, gap[:-1]])
        ends = np.flatnonzero(gap & ~np.r_[gap[1:], False])
        line, c = keys[k]
        who = f"line {line!r}" + (f" circuit {c}" if c else "")
        for s, e in zip(starts, ends, strict=True):
            add(-1, "current_a", f"gap: no value for {who} from {_iso(grid[s])} to"
                f" {_iso(grid[e])}"
                f" ({e - s + 1} step{'s' if e > s else ''}); filled with the series maximum"
                f" of that circuit, {fill:g} A (conservative)", action="filled")
    listed = {key[0] for key in keys}
    for line in sorted(set(line_circuits) - listed):
        add(-1, "line_id", f"line {line!r} has no rows in the series: its layer load is used"
            " at every step", action="note")
    if len(problems) > MAX_KEPT:  # run.json keeps the first ones and the count
        more = len(problems) - MAX_KEPT
        problems = problems[:MAX_KEPT] + [{
            "file": name, "row": "", "field": "", "action": "note",
            "reason": f"{more} more problems not listed (fix the ones above and run again)"}]
    if len(problems) > MAX_LISTED:
        log.warning("load series %s: %d problems, the first %d listed", name, len(problems),
                    MAX_LISTED)
    for p in problems[:MAX_LISTED]:
        log.warning("load series %s: %s %s: %s (%s)", name, p["row"], p["field"], p["reason"],
                    p["action"])
    return LoadSeries(grid.astype("datetime64[s]"), step / 3.6e12, keys, cur, off_m, dir_m,
                      problems, rows_read=n, rows_used=int(used.size))
