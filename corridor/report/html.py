"""HTML building blocks of the report: escaping, numbers, units, tables, the caps."""


from __future__ import annotations

import html
import logging
import re

import numpy as np
import pandas as pd

from corridor.io.styles import (
    describe_column,
)
from corridor.limits.limit_sets import HAZARD_CLASSES

log = logging.getLogger(__name__)

#: Default cap on the number of profile plots.
MAX_PROFILES = 20
#: Default number of rows in each ranked table.
MAX_ROWS = 25
#: Segments per asset in the worst-segments table (so one asset cannot fill it).
SEGMENTS_PER_ASSET = 5
#: Above this many map segments the asset lines are rasterised inside the SVG.
RASTER_ABOVE = 20000
#: Asset labels on the map up to this many assets.
MAP_LABELS = 60
#: Above this many points per profile series, draw a max/min envelope.
PROFILE_POINTS = 2000


# --------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------


def esc(x) -> str:
    return html.escape(str(x), quote=True)


def fmt_num(v, digits: int = 3) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return esc(v)
    if not np.isfinite(f):
        return "–"
    if abs(f) >= 1000:
        return f"{f:,.0f}"
    return f"{f:.{digits}g}"


def unit_of(column: str) -> str:
    d = describe_column(column)
    if d is None:
        return ""
    m = re.search(r"\[([^\]]+)\]\.?$", d[1])
    return "" if m is None or m.group(1) == "-" else m.group(1)


def _title(column: str) -> str:
    d = describe_column(column)
    return d[0] if d else column.replace("_", " ")


def _header(column: str) -> str:
    title = _title(column)
    unit = unit_of(column)
    return f"{esc(title)} [{esc(unit)}]" if unit else esc(title)


def class_badge(value) -> str:
    v = str(value)
    if v in HAZARD_CLASSES:
        return f'<span class="badge {v.replace(" ", "-")}">{esc(v)}</span>'
    return esc(v)


def html_table(frame: pd.DataFrame, columns: list[str], caption: str = "",
               km: tuple[str, ...] = (), headers: dict[str, str] | None = None,
               raw: tuple[str, ...] = (), numeric: tuple[str, ...] = ()) -> str:
    """An HTML table of ``columns`` (those present), numbers formatted.

    Parameters
    ----------
    frame : DataFrame
        The rows.
    columns : list of str
        Columns to show, in order; absent ones are skipped.
    caption : str, optional
        Caption above the table.
    km : tuple of str, optional
        Columns in metres shown in km.
    headers : dict, optional
        Header text by column (plain text); default the glossary title and unit.
    raw : tuple of str, optional
        Columns whose values are HTML already (escaped by the caller).
    numeric : tuple of str, optional
        ``raw`` columns to align as numbers.
    """
    headers = headers or {}
    cols = [c for c in columns if c in frame.columns]

    def head_of(c):
        if c in headers:
            return esc(headers[c])
        return _header(c) if c not in km else esc(_title(c)) + " [km]"

    head = "".join(f"<th>{head_of(c)}</th>" for c in cols)
    rows = []
    data = {c: frame[c].to_numpy() for c in cols}
    for i in range(len(frame)):
        cells = []
        for c in cols:
            v = data[c][i]
            if c in raw:
                cls = ' class="n"' if c in numeric else ""
                cells.append(f"<td{cls}>{v}</td>")
            elif c == "hazard_class":
                cells.append(f"<td>{class_badge(v)}</td>")
            elif c in km:
                cells.append(f'<td class="n">{fmt_num(float(v) / 1000.0, 4)}</td>')
            elif isinstance(v, int | float | np.number) and not isinstance(v, bool | np.bool_):
                cells.append(f'<td class="n">{fmt_num(v)}</td>')
            elif c == "line_ids" or c.endswith("_ids"):
                # ';'-joined ids: a break opportunity after each separator
                ids = [esc(x) for x in str("" if v is None else v).split(";") if x]
                cells.append(f"<td>{';<wbr> '.join(ids)}</td>")
            else:
                cells.append(f"<td>{esc('' if v is None or v is pd.NA else v)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{esc(caption)}</caption>" if caption else ""
    return (f'<div class="tablewrap"><table>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")
