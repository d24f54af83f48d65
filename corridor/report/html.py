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


def _header(column: str) -> str:
    d = describe_column(column)
    title = d[0] if d else column.replace("_", " ")
    unit = unit_of(column)
    return f"{esc(title)} [{esc(unit)}]" if unit else esc(title)


def class_badge(value) -> str:
    v = str(value)
    if v in HAZARD_CLASSES:
        return f'<span class="badge {v}">{esc(v)}</span>'
    return esc(v)


def html_table(frame: pd.DataFrame, columns: list[str], caption: str = "",
           km: tuple[str, ...] = ()) -> str:
    """An HTML table of ``columns`` (those present), numbers formatted."""
    cols = [c for c in columns if c in frame.columns]
    head = "".join(
        f"<th>{_header(c) if c not in km else esc(describe_column(c)[0]) + ' [km]'}</th>"
        for c in cols)
    rows = []
    data = {c: frame[c].to_numpy() for c in cols}
    for i in range(len(frame)):
        cells = []
        for c in cols:
            v = data[c][i]
            if c == "hazard_class":
                cells.append(f"<td>{class_badge(v)}</td>")
            elif c in km:
                cells.append(f'<td class="n">{fmt_num(float(v) / 1000.0, 4)}</td>')
            elif isinstance(v, int | float | np.number) and not isinstance(v, bool | np.bool_):
                cells.append(f'<td class="n">{fmt_num(v)}</td>')
            else:
                cells.append(f"<td>{esc('' if v is None or v is pd.NA else v)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{esc(caption)}</caption>" if caption else ""
    return (f'<div class="tablewrap"><table>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


