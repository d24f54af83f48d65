"""A self-contained HTML report of a finished screening run.

``report.html`` opens offline: CSS is inline, every figure is an inline SVG
drawn with matplotlib from the run's own geometries (no web tiles, fonts or
scripts). It opens with a banner for every rejected power line (the results
are incomplete near it) and one for the limit-set criteria the run could not
assess (they never count as passing). Sections: safety caution, summary
(inputs with date and SHA-256 prefix, CRS, limit set, counts by hazard
class, worst assets, change since the previous run), overview map, ranked
tables of the worst assets, exposures and segments, a |V|-along-chainage profile for each asset that
exceeds a limit (capped), rejected input features (power lines, assets,
others), the defaults used per field (with the feature ids for the
safety-relevant fields), the limit set's criteria (with what was not
assessed), and the method's assumptions.

Large runs stay small and fast: map geometries are simplified to well below
the drawing resolution and drawn as one ``LineCollection`` per layer
(rasterised inside the SVG above :data:`RASTER_ABOVE` segments), profile
series are reduced to a max/min envelope above :data:`PROFILE_POINTS`
points, and at most ``max_profiles`` profiles are drawn.
"""

from __future__ import annotations

import html
import io
import json
import logging
import re
from datetime import UTC, datetime
from pathlib import Path

import matplotlib as mpl
import numpy as np
import pandas as pd
import shapely
from matplotlib import patheffects
from matplotlib.collections import LineCollection
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter, NullLocator

from corridor import __version__
from corridor.io.outputs import SAFETY_CAUTION, sha256_file
from corridor.io.styles import (
    HAZARD_COLOURS,
    SITE_COLOUR,
    SITE_OUTLINE,
    VOLTAGE_BANDS,
    describe_column,
    utilization_bands,
)
from corridor.limits.limit_sets import DEFAULT_REVIEW_THRESHOLD, HAZARD_CLASSES

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

_NORMAL_COLOUR = "#2b6cb0"
_FAULT_COLOUR = "#c05621"
_LIMIT_COLOUR = "#1a1a1a"
_JUDGED_COLOUR = "#6b46c1"
_SEPARATION_COLOUR = "#8a8a8a"

_RC = {
    "svg.fonttype": "none",  # text stays text: small files, crisp in the browser
    "font.family": "sans-serif",
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.spines.top": False,
    "svg.image_inline": True,
}

# --------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------


def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _num(v, digits: int = 3) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return _esc(v)
    if not np.isfinite(f):
        return "–"
    if abs(f) >= 1000:
        return f"{f:,.0f}"
    return f"{f:.{digits}g}"


def _unit(column: str) -> str:
    d = describe_column(column)
    if d is None:
        return ""
    m = re.search(r"\[([^\]]+)\]\.?$", d[1])
    return "" if m is None or m.group(1) == "-" else m.group(1)


def _header(column: str) -> str:
    d = describe_column(column)
    title = d[0] if d else column.replace("_", " ")
    unit = _unit(column)
    return f"{_esc(title)} [{_esc(unit)}]" if unit else _esc(title)


def _class_badge(value) -> str:
    v = str(value)
    if v in HAZARD_CLASSES:
        return f'<span class="badge {v}">{_esc(v)}</span>'
    return _esc(v)


def _table(frame: pd.DataFrame, columns: list[str], caption: str = "",
           km: tuple[str, ...] = ()) -> str:
    """An HTML table of ``columns`` (those present), numbers formatted."""
    cols = [c for c in columns if c in frame.columns]
    head = "".join(
        f"<th>{_header(c) if c not in km else _esc(describe_column(c)[0]) + ' [km]'}</th>"
        for c in cols)
    rows = []
    data = {c: frame[c].to_numpy() for c in cols}
    for i in range(len(frame)):
        cells = []
        for c in cols:
            v = data[c][i]
            if c == "hazard_class":
                cells.append(f"<td>{_class_badge(v)}</td>")
            elif c in km:
                cells.append(f'<td class="n">{_num(float(v) / 1000.0, 4)}</td>')
            elif isinstance(v, int | float | np.number) and not isinstance(v, bool | np.bool_):
                cells.append(f'<td class="n">{_num(v)}</td>')
            else:
                cells.append(f"<td>{_esc('' if v is None or v is pd.NA else v)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{_esc(caption)}</caption>" if caption else ""
    return (f'<div class="tablewrap"><table>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def _svg(fig: Figure) -> str:
    """A figure as an SVG fragment for inlining (no prolog, DOCTYPE or metadata)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    text = re.sub(r"<\?xml[^>]*\?>\s*", "", text)
    text = re.sub(r"<!DOCTYPE[^>]*>\s*", "", text)
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    return text


def _figure(width_in: float, height_in: float) -> Figure:
    # Fixed margins (set by each plot), not a layout engine: a layout engine
    # draws the figure again to measure it, which triples the time per plot.
    return Figure(figsize=(width_in, height_in), dpi=100)


def _plain_number(value, _pos=None) -> str:
    return f"{value:g}"


def _quiet_log_axis(axis) -> None:
    """Log axis with plain decade labels and no minor ticks.

    Plain text instead of mathtext powers of ten, and no minor ticks: both cost
    most of a plot's drawing time and add little to a screening profile.
    """
    axis.set_major_formatter(FuncFormatter(_plain_number))
    axis.set_minor_locator(NullLocator())


def _line_coords(geoms, tolerance_m: float = 0.0):
    """Vertex arrays of every line part, and the index of the geometry each came from."""
    geoms = np.asarray(geoms, dtype=object)
    if len(geoms) == 0:
        return [], np.zeros(0, np.intp)
    parts, owner = shapely.get_parts(geoms, return_index=True)
    if tolerance_m > 0:
        parts = shapely.simplify(parts, tolerance_m, preserve_topology=False)
    coords, cidx = shapely.get_coordinates(parts, return_index=True)
    if len(coords) == 0:
        return [], np.zeros(0, np.intp)
    starts = np.r_[0, np.flatnonzero(np.diff(cidx)) + 1]
    lines = np.split(coords, starts[1:])
    return lines, owner[cidx[starts]]


def _band_runs(seg, util, edges, tolerance_m: float):
    """Polylines of consecutive segments of one asset part in one utilization band.

    Drawing runs instead of single segments keeps the map's path count near
    the number of assets (a whole network has millions of segments). Vertices
    closer than ``tolerance_m`` along a run are thinned; each run keeps its
    ends. Returns the vertex arrays and each run's highest utilization.
    """
    n = len(seg)
    if n == 0:
        return [], np.zeros(0)
    xy = shapely.get_coordinates(seg.geometry.to_numpy())
    if len(xy) != 2 * n:  # not all simple two-point segments: draw them one by one
        lines, owner = _line_coords(seg.geometry.to_numpy(), tolerance_m)
        return lines, util[owner]
    xy = xy.reshape(n, 2, 2)
    band = np.digitize(np.nan_to_num(util, nan=0.0), np.asarray(edges[1:-1], float))
    asset = pd.factorize(seg["asset_id"].to_numpy(dtype=object))[0]
    part = seg["part"].to_numpy() if "part" in seg else np.zeros(n, int)
    joined = np.all(xy[1:, 0] == xy[:-1, 1], axis=1)
    new = np.r_[True, (asset[1:] != asset[:-1]) | (part[1:] != part[:-1])
                | (band[1:] != band[:-1]) | ~joined]
    run = np.cumsum(new) - 1
    starts = np.flatnonzero(new)
    ends = np.r_[starts[1:], n] - 1
    length = np.hypot(*(xy[:, 1] - xy[:, 0]).T)
    step = max(1, int(tolerance_m / max(float(np.median(length)), 1e-9)))
    pos = np.arange(n) - starts[run]
    keep = (pos % step == 0)
    pts = xy[keep, 0]
    rid = run[keep]
    # append each run's last end point
    pts = np.concatenate([pts, xy[ends, 1]])
    rid = np.concatenate([rid, np.arange(len(starts))])
    order = np.argsort(rid, kind="stable")
    pts, rid = pts[order], rid[order]
    cuts = np.flatnonzero(np.diff(rid)) + 1
    value = np.maximum.reduceat(np.nan_to_num(util, nan=0.0), starts)
    return np.split(pts, cuts), value


def _nice_length_m(span_m: float) -> float:
    target = span_m / 5.0
    p = 10.0 ** np.floor(np.log10(target))
    for k in (5.0, 2.0, 1.0):
        if k * p <= target:
            return k * p
    return p


def _voltage_colour(kv: float) -> str:
    for lo, hi, colour in VOLTAGE_BANDS:
        if kv >= lo and (hi is None or kv < hi):
            return colour
    return VOLTAGE_BANDS[0][2]


def _ramp(review_threshold: float, top: float):
    bands = utilization_bands(review_threshold)
    edges = [b[0] for b in bands] + [max(top, 2.0 * bands[-1][0])]
    cmap = ListedColormap([b[2] for b in bands])
    return cmap, BoundaryNorm(edges, cmap.N), edges


# --------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------


def overview_map(run, review_threshold: float) -> str:
    """Inline SVG of the corridor: lines by voltage, assets by utilization, sites."""
    lines = run.inputs.lines
    seg = run.segment_table
    sites = run.extra_tables.get("layer:sites")
    geoms = [g for g in (lines.geometry, seg.geometry) if len(g)]
    if not geoms:
        return "<p>No geometry to draw.</p>"
    b = np.array([g.total_bounds for g in geoms])
    xmin, ymin = b[:, 0].min(), b[:, 1].min()
    xmax, ymax = b[:, 2].max(), b[:, 3].max()
    span = max(xmax - xmin, ymax - ymin, 1.0)
    tol = span / 4000.0  # well below one pixel of the drawn map
    util = seg["utilization"].to_numpy(float) if "utilization" in seg else np.zeros(len(seg))
    cmap, norm, edges = _ramp(review_threshold, float(np.nanmax(util, initial=0.0)) * 1.01)

    # Figure height follows the data's aspect so that the map fills its box.
    width_in, map_frac = 9.5, 0.86
    aspect = (ymax - ymin + 0.08 * span) / (xmax - xmin + 0.08 * span)
    height_in = float(np.clip(width_in * map_frac * aspect / 0.98, 3.6, 9.0))
    with mpl.rc_context({**_RC, "svg.hashsalt": "corridor-map"}):
        fig = _figure(width_in, height_in)
        ax = fig.add_axes((0.01, 0.01, map_frac, 0.98))
        cax = fig.add_axes((0.895, 0.08, 0.02, 0.84))
        ax.set_aspect("equal")
        handles = []
        kv = lines["voltage_kv"].to_numpy(float)
        lcoords, lowner = _line_coords(lines.geometry.to_numpy(), tol)
        if len(lcoords):
            colours = [_voltage_colour(kv[o]) for o in lowner]
            widths = 1.0 + np.clip(kv[lowner], 0, 800) / 200.0
            ax.add_collection(LineCollection(lcoords, colors=colours, linewidths=widths,
                                             linestyles=(0, (6, 2)), zorder=2, capstyle="butt"))
        for v in sorted(set(kv[np.isfinite(kv)])):
            handles.append(Line2D([], [], color=_voltage_colour(v), lw=1.0 + v / 200.0,
                                  ls=(0, (6, 2)), label=f"power line {v:g} kV"))
        # thin runs to about half a pixel of the ~900 px wide map
        scoords, svalue = _band_runs(seg, util, edges, span / 1800.0)
        if len(scoords):
            n_vertices = sum(len(c) for c in scoords)
            coll = LineCollection(scoords, cmap=cmap, norm=norm, linewidths=2.6, zorder=3,
                                  capstyle="round", rasterized=n_vertices > RASTER_ABOVE)
            coll.set_array(svalue)
            ax.add_collection(coll)
            cb = fig.colorbar(coll, cax=cax, spacing="uniform", ticks=edges[:-1])
            cb.ax.set_yticklabels([f"{e:g}" for e in edges[:-1]])
            cb.set_label("utilization [-]  (clear · review · exceeds)")
        if sites is not None and len(sites):
            pts = shapely.get_coordinates(shapely.centroid(sites.geometry.to_numpy()))
            ax.scatter(pts[:, 0], pts[:, 1], marker="^", s=70, c=SITE_COLOUR,
                       edgecolors=SITE_OUTLINE, linewidths=1.2, zorder=5)
            handles.append(Line2D([], [], marker="^", ls="", mfc=SITE_COLOUR, mec=SITE_OUTLINE,
                                  ms=8, label="grounding site"))
        for k in HAZARD_CLASSES:
            handles.append(Line2D([], [], color=HAZARD_COLOURS[k], lw=2.6, label=f"asset: {k}"))
        assets = run.extra_tables.get("layer:assets")
        if assets is not None and 0 < len(assets) <= MAP_LABELS:
            mid = shapely.get_coordinates(shapely.line_interpolate_point(
                assets.geometry.to_numpy(), 0.5, normalized=True))
            halo = [patheffects.withStroke(linewidth=2.5, foreground="white")]
            for (x, y), name in zip(mid, assets["asset_id"].astype(str), strict=True):
                ax.text(x, y, f" {name}", fontsize=7, ha="left", va="bottom", zorder=7,
                        path_effects=halo)
        pad = 0.04 * span
        ax.set_xlim(xmin - pad, xmax + pad)
        ax.set_ylim(ymin - pad, ymax + pad)
        ax.set_xticks([])
        ax.set_yticks([])
        for s in ax.spines.values():
            s.set_visible(True)
            s.set_color("#999999")
        if not run.inputs.crs.is_geographic:
            width = (xmax - xmin) + 2 * pad
            length = _nice_length_m(width)
            x0, y0 = xmin - pad + 0.04 * width, ymin - pad + 0.04 * ((ymax - ymin) + 2 * pad)
            h = 0.012 * ((ymax - ymin) + 2 * pad)
            ax.fill_between([x0, x0 + length / 2], y0, y0 + h, color="#1a1a1a", zorder=6)
            ax.fill_between([x0 + length / 2, x0 + length], y0, y0 + h, color="#ffffff",
                            edgecolor="#1a1a1a", lw=0.8, zorder=6)
            label = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
            ax.text(x0 + length / 2, y0 + 1.8 * h, label, ha="center", va="bottom", zorder=6)
        ax.annotate("", xy=(0.95, 0.95), xytext=(0.95, 0.83), xycoords="axes fraction",
                    arrowprops={"arrowstyle": "-|>", "color": "#1a1a1a", "lw": 1.6})
        ax.text(0.95, 0.965, "N", transform=ax.transAxes, ha="center", va="bottom",
                fontweight="bold", fontsize=11)
        ax.text(0.95, 0.81, "grid", transform=ax.transAxes, ha="center", va="top", fontsize=7)
        ax.legend(handles=handles, loc="upper left", fontsize=8, framealpha=0.9)
        svg = _svg(fig)
    return svg


def _envelope(x, ys_max, ys_min, limit: int):
    """Reduce series to ``limit`` bins: mean x, max of ``ys_max``, min of ``ys_min``."""
    n = len(x)
    if n <= limit:
        return x, ys_max, ys_min
    starts = np.linspace(0, n, limit, endpoint=False).astype(np.intp)
    counts = np.diff(np.r_[starts, n])
    xm = np.add.reduceat(x, starts) / counts
    mx = [np.fmax.reduceat(y, starts) for y in ys_max]
    mn = [np.fmin.reduceat(y, starts) for y in ys_min]
    return xm, mx, mn


def _criterion(run, label: str):
    name = str(label).split(":", 1)[0]
    for c in getattr(getattr(run, "limit_set", None), "criteria", ()):
        if c.name == name:
            return c
    return None


def _governing_values(run, crit, idx: np.ndarray):
    """Judged quantity and permitted value of one criterion on segments ``idx``.

    The limit set is evaluated again on just these rows of the segment table,
    so the values line up with the table whatever order earlier stages left
    ``run.assessment`` in; a criterion's permitted value may vary per segment
    (clearing time, soil, coating).
    """
    if crit is None:
        return None, None
    t = run.segment_table
    sub = t.iloc[idx]
    try:
        from corridor.steps.assess import assess

        cats = {}
        assets = run.inputs.assets
        if "coating_type" in assets:
            by_id = dict(zip(assets["asset_id"], assets["coating_type"].astype(str),
                             strict=False))
            cats["coating_type"] = sub["asset_id"].map(by_id).fillna("").to_numpy(str)
        res = assess(run.limit_set, sub, cats)
        permitted = np.asarray(res["permitted"][crit.name], float)
        q = res["quantities"].get(crit.quantity)
        q = None if q is None else np.abs(np.asarray(q, float))
        return q, permitted
    except (KeyError, AttributeError, ValueError) as exc:
        log.debug("limit not re-evaluated for the profile (%s); using ratios", exc)
    ratio_col = f"ratio_{crit.name}"
    if crit.quantity in t and ratio_col in t:
        q = np.abs(sub[crit.quantity].to_numpy(float))
        r = sub[ratio_col].to_numpy(float)
        ok = np.isfinite(r) & (r > 0)
        permitted = np.full(len(idx), np.nan)
        np.divide(q, r, out=permitted, where=ok)
        return q, permitted
    return None, None


def _after_grounding(run, asset: pd.Series, idx: np.ndarray, sites: pd.DataFrame | None):
    """|V| normal and fault on segments ``idx`` with the proposed grounds, or None."""
    after = getattr(run, "segment_table_after_grounding", None)
    if (after is None or sites is None or not len(sites)
            or not {"asset_id", "segment_index", "v_normal_v", "v_fault_v"} <= set(after.columns)):
        return None
    if "ground_resistance_ohm" in sites and not sites["ground_resistance_ohm"].notna().any():
        return None  # no ground proposed here: the response is unchanged
    a = after[after["asset_id"] == asset["asset_id"]].drop_duplicates("segment_index")
    if not len(a):
        return None
    a = a.set_index("segment_index")
    keys = run.segment_table["segment_index"].to_numpy()[idx]
    return (a["v_normal_v"].reindex(keys).to_numpy(float),
            a["v_fault_v"].reindex(keys).to_numpy(float))


def profile_plot(run, asset: pd.Series, idx: np.ndarray, sites: pd.DataFrame | None,
                 salt: str) -> str:
    """Inline SVG: |V| along chainage for one asset, its governing limit, separation, sites."""
    t = run.segment_table
    idx = idx[np.lexsort((t["chainage_m"].to_numpy(float)[idx], t["part"].to_numpy()[idx]))]
    x_km = (t["chainage_m"].to_numpy(float)[idx] + 0.5 * t["length_m"].to_numpy(float)[idx]) / 1e3
    vn = t["v_normal_v"].to_numpy(float)[idx]
    vf = t["v_fault_v"].to_numpy(float)[idx]
    sep = t["separation_m"].to_numpy(float)[idx]
    crit = _criterion(run, asset.get("governing", ""))
    q_name = crit.quantity if crit is not None else ""
    q_vals, permitted = _governing_values(run, crit, idx)
    is_voltage = _unit(q_name) == "V" or q_name.endswith("_v")
    extra = q_vals if (q_vals is not None and q_name not in ("v_normal_v", "v_fault_v")) else None
    lim = permitted if permitted is not None else np.full(len(idx), np.nan)
    qv = extra if extra is not None else np.full(len(idx), np.nan)
    after = _after_grounding(run, asset, idx, sites)
    an, af = after if after is not None else (np.full(len(idx), np.nan),) * 2
    xs, (vn, vf, sep, qv, an, af), (lim,) = _envelope(x_km, [vn, vf, sep, qv, an, af], [lim],
                                                      PROFILE_POINTS)
    two_panels = extra is not None and not is_voltage

    with mpl.rc_context({**_RC, "svg.hashsalt": salt}):
        fig = _figure(9.5, 4.6 if two_panels else 3.4)
        if two_panels:
            ax, axq = fig.subplots(2, 1, sharex=True, height_ratios=(2.2, 1.0))
            fig.subplots_adjust(left=0.08, right=0.68, top=0.93, bottom=0.10, hspace=0.12)
        else:
            ax, axq = fig.add_subplot(), None
            fig.subplots_adjust(left=0.08, right=0.68, top=0.90, bottom=0.14)
        ax.plot(xs, vn, color=_NORMAL_COLOUR, lw=1.4, label="|V| normal load")
        ax.plot(xs, vf, color=_FAULT_COLOUR, lw=1.4, label="|V| earth fault")
        series = [vn, vf]
        if after is not None:
            ax.plot(xs, an, color=_NORMAL_COLOUR, lw=0.9, alpha=0.55, ls=(0, (4, 1.5)),
                    label="|V| normal, with proposed grounds")
            ax.plot(xs, af, color=_FAULT_COLOUR, lw=0.9, alpha=0.55, ls=(0, (4, 1.5)),
                    label="|V| fault, with proposed grounds")
            series += [an, af]
        if is_voltage and crit is not None:
            if extra is not None:
                ax.plot(xs, qv, color=_JUDGED_COLOUR, lw=1.0, ls="--",
                        label=f"{q_name} (judged)")
                series.append(qv)
            if np.isfinite(lim).any():
                ax.plot(xs, lim, color=_LIMIT_COLOUR, lw=1.3, ls="-.", drawstyle="steps-mid",
                        label=f"limit: {crit.name} [V]")
                series.append(lim)
        vals = np.concatenate([s[np.isfinite(s) & (s > 0)] for s in series])
        if len(vals) and vals.max() / max(vals.min(), 1e-300) > 100.0:
            ax.set_yscale("log")
            _quiet_log_axis(ax.yaxis)
        ax.set_ylabel("|V| to remote earth [V]")
        ax.grid(True, which="major", color="#e5e5e5", lw=0.6)
        ax2 = ax.twinx()
        ax2.spines["right"].set_visible(True)
        ax2.plot(xs, sep, color=_SEPARATION_COLOUR, lw=0.9, ls=":",
                 label="separation to nearest line")
        ax2.set_ylabel("separation [m]", color="#666666")
        ax2.set_ylim(bottom=0.0)
        handles = ax.get_legend_handles_labels()[0] + ax2.get_legend_handles_labels()[0]
        if sites is not None and len(sites) and "chainage_m" in sites:
            sx = sites["chainage_m"].to_numpy(float) / 1e3
            for s in sx:
                ax.axvline(s, color=SITE_OUTLINE, lw=0.7, ls=(0, (2, 2)), zorder=1)
            ax.plot(sx, np.full(len(sx), 1.0), ls="", marker="^", ms=8, mfc=SITE_COLOUR,
                    mec=SITE_OUTLINE, transform=ax.get_xaxis_transform(), clip_on=False)
            handles.append(Line2D([], [], marker="^", ls="", mfc=SITE_COLOUR, mec=SITE_OUTLINE,
                                  ms=8, label="grounding site"))
            if {"v_before_v", "v_after_v"} <= set(sites.columns):
                vb = sites["v_before_v"].to_numpy(float)
                va = sites["v_after_v"].to_numpy(float)
                ax.vlines(sx, np.fmin(vb, va), np.fmax(vb, va), color=SITE_OUTLINE, lw=0.8)
                ax.plot(sx, vb, ls="", marker="o", ms=5, mfc="none", mec=SITE_OUTLINE)
                ax.plot(sx, va, ls="", marker="o", ms=5, mfc=SITE_OUTLINE, mec=SITE_OUTLINE)
                handles += [Line2D([], [], marker="o", ls="", mfc="none", mec=SITE_OUTLINE,
                                   label="|V| before grounding"),
                            Line2D([], [], marker="o", ls="", mfc=SITE_OUTLINE,
                                   mec=SITE_OUTLINE, label="|V| after grounding")]
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.13, 1.0), fontsize=8,
                  frameon=False)
        if axq is not None:
            unit = _unit(q_name)
            axq.plot(xs, qv, color=_FAULT_COLOUR if crit.case == "fault" else _NORMAL_COLOUR,
                     lw=1.2, label=f"{q_name}")
            if np.isfinite(lim).any():
                axq.plot(xs, lim, color=_LIMIT_COLOUR, lw=1.3, ls="-.", drawstyle="steps-mid",
                         label=f"limit: {crit.name}")
            pos = qv[np.isfinite(qv) & (qv > 0)]
            if len(pos) and pos.max() / max(pos.min(), 1e-300) > 100.0:
                axq.set_yscale("log")
                _quiet_log_axis(axq.yaxis)
            axq.set_ylabel(f"{q_name} [{unit}]" if unit else q_name)
            axq.grid(True, color="#e5e5e5", lw=0.6)
            axq.legend(loc="upper left", bbox_to_anchor=(1.13, 1.0), fontsize=8, frameon=False)
            axq.set_xlabel("chainage [km]")
        else:
            ax.set_xlabel("chainage [km]")
        ax.set_title(f"{asset['asset_id']} ({asset.get('asset_kind', '')}) — worst utilization"
                     f" {_num(asset.get('worst_utilization', np.nan))}", loc="left")
        svg = _svg(fig)
    return svg


# --------------------------------------------------------------------------
# Sections
# --------------------------------------------------------------------------

#: Fields whose filled-in defaults the report lists asset by asset (their ids): a
#: default there can hide a hazard (fault level and duration, fence posts, pipeline
#: coating, how an asset ends).
SAFETY_DEFAULT_FIELDS = (
    "fault_current_start_ka", "fault_current_end_ka", "clearing_time_s", "post_type",
    "coating_type", "coating_resistance_ohm_m2", "start_termination", "end_termination",
    "termination_resistance_ohm",
)
#: Most ids listed per field in the report (run.json keeps them all).
MAX_IDS = 200


def _role_rows(run, role: str) -> list[dict]:
    """Rows of ``run.inputs.rejected`` of one role (power_lines, assets, soil, ...).

    Rows without a ``role`` key are placed by their layer label: the power-line
    layer, an asset layer, else other.
    """
    rej = getattr(getattr(run, "inputs", None), "rejected", None)
    rows = list(getattr(rej, "rows", None) or [])
    cfg = run.config
    line_label = getattr(getattr(cfg, "power_lines", None), "label", None)
    asset_labels = {getattr(a, "label", None) for a in getattr(cfg, "assets", ()) or ()}

    def role_of(r):
        if r.get("role"):
            return r["role"]
        if line_label is not None and r.get("layer") == line_label:
            return "power_lines"
        if r.get("layer") in asset_labels:
            return "assets"
        return "other"

    if role == "other":
        return [r for r in rows if role_of(r) not in ("power_lines", "assets")]
    return [r for r in rows if role_of(r) == role]


def _rejected_lines_banner(run) -> str:
    """The banner that opens the report when a power line was rejected."""
    rows = _role_rows(run, "power_lines")
    if not rows:
        return ""
    accepted = bool(run.config.run.get("accept_rejected_lines", False))
    reach = run.config.run.get("screening_distance_m", "")
    items = "".join(f"<li><b>{_esc(r.get('feature_id', ''))}</b> ({_esc(r.get('layer', ''))}):"
                    f" field <code>{_esc(r.get('field', ''))}</code> — {_esc(r.get('reason', ''))}"
                    "</li>" for r in rows)
    note = (" The run was told to accept rejected lines (<code>accept_rejected_lines</code>);"
            " that changes the exit code only, not what is missing." if accepted else "")
    return (f'<div class="alert" id="rejected-lines" role="alert"><strong>Results incomplete'
            f"</strong>{len(rows)} power line{'s were' if len(rows) != 1 else ' was'} rejected"
            " and left out of the screening. Every asset within the screening distance"
            f" ({_esc(reach)} m) of {'them' if len(rows) != 1 else 'it'} is assessed without"
            " its induction, fault and earth-potential contribution: an asset shown clear"
            f" there may not be.{note} Fix the line data and run again."
            f"<ul>{items}</ul></div>")


def _not_assessed(run) -> list[dict]:
    extra = run.extra_tables.get("json", {}) if hasattr(run, "extra_tables") else {}
    rows = extra.get("not_assessed") if isinstance(extra, dict) else None
    if rows is None:
        from corridor.steps.report_tables import not_assessed_criteria

        rows = not_assessed_criteria(run)
    return list(rows)


def _not_assessed_banner(rows: list[dict]) -> str:
    if not rows:
        return ""
    items = "".join(f"<li><code>{_esc(r.get('label', r.get('criterion', '')))}</code>"
                    f" (<code>{_esc(r.get('quantity', ''))}</code>"
                    + (f", {_num(r['segments'])} segments" if "segments" in r else "")
                    + f"): {_esc(r.get('reason', ''))}</li>" for r in rows)
    return ('<div class="alert" id="not-assessed" role="alert"><strong>Not assessed</strong>'
            f"{len(rows)} criteri{'a' if len(rows) != 1 else 'on'} of the limit set could not be"
            " judged on any segment. They did NOT pass: a segment shown clear was not checked"
            " against them. Check these hazards by other means."
            f"<ul>{items}</ul></div>")


def _rejected_section(run) -> str:
    """Tables of rejected assets and other rejected input features."""
    parts = ['<section id="rejected"><h2>Rejected input features</h2>']
    cols = ["layer", "feature_id", "field", "reason"]
    lines = _role_rows(run, "power_lines")
    assets = _role_rows(run, "assets")
    other = _role_rows(run, "other")
    if not (lines or assets or other):
        parts.append("<p>No input feature was rejected.</p></section>")
        return "".join(parts)
    for title, rows in (("Power lines", lines), ("Assets", assets),
                        ("Soil, grounds and towers", other)):
        if not rows:
            continue
        frame = pd.DataFrame(rows).reindex(columns=cols)
        shown = frame.head(MAX_ROWS * 4)
        parts.append(f"<h3>{_esc(title)}</h3>")
        parts.append(_table(shown, cols, f"{len(shown)} of {len(frame)} rejected; every one is"
                            " in rejected.csv"))
    if assets:
        parts.append("<p>Rejected assets are not screened at all: they are in no layer"
                     " but rejected.csv.</p>")
    parts.append("</section>")
    return "".join(parts)


def _defaults_section(run) -> str:
    """Counts of values filled from defaults per field; ids for the safety-relevant ones."""
    used = getattr(getattr(run, "inputs", None), "defaults_used", None)
    parts = ['<section id="defaults"><h2>Defaults used</h2>']
    if used is None:
        parts.append("<p>This run did not record which values came from defaults.</p>"
                     "</section>")
        return "".join(parts)
    if not used:
        parts.append("<p>No missing value was filled from defaults.</p></section>")
        return "".join(parts)
    rows = []
    for fld in sorted(used):
        ids = [str(i) for i in used[fld]]
        safety = fld in SAFETY_DEFAULT_FIELDS
        listed = ""
        if safety:
            listed = ", ".join(ids[:MAX_IDS]) + (f" … and {len(ids) - MAX_IDS} more (run.json)"
                                                 if len(ids) > MAX_IDS else "")
        rows.append(f"<tr><td><code>{_esc(fld)}</code></td><td class='n'>{len(ids)}</td>"
                    f"<td>{'yes' if safety else ''}</td>"
                    f"<td style='white-space:normal'>{_esc(listed)}</td></tr>")
    parts.append("<p>Missing values filled from the asset kind's defaults or"
                 " <code>[line_defaults]</code>. Where a default decides safety (fault current,"
                 " clearing time, post type, coating, terminations) the features are listed:"
                 " check them in the field data.</p>")
    parts.append("<div class='tablewrap'><table><thead><tr><th>Field</th><th>Features</th>"
                 "<th>Safety-relevant</th><th>Ids</th></tr></thead>"
                 f"<tbody>{''.join(rows)}</tbody></table></div></section>")
    return "".join(parts)



def _input_records(run, out_dir: Path) -> list[dict]:
    record = out_dir / "run.json"
    if record.exists():
        try:
            data = json.loads(record.read_text(encoding="utf-8"))
            if data.get("inputs"):
                return list(data["inputs"])
        except (OSError, ValueError):
            log.debug("run.json unreadable; hashing inputs again")
    cfg = run.config
    paths = [getattr(cfg, "path", None), getattr(cfg, "arrangements_path", None)]
    paths += [getattr(cfg.power_lines, "path", None)] if getattr(cfg, "power_lines", None) else []
    paths += [a.path for a in getattr(cfg, "assets", ())]
    paths += [getattr(s, "path", None) for s in (getattr(cfg, "soil", None),
                                                 getattr(cfg, "grounds", None),
                                                 getattr(cfg, "towers", None)) if s is not None]
    out = []
    for p in dict.fromkeys(Path(p) for p in paths if p is not None):
        if p.exists():
            out.append({"path": str(p), "sha256": sha256_file(p),
                        "modified_utc": datetime.fromtimestamp(p.stat().st_mtime, UTC)
                        .isoformat(timespec="seconds")})
    return out


def _summary(run, out_dir: Path, assets: pd.DataFrame | None, previous: dict | None,
             review_threshold: float, inputs: list[dict] | None = None) -> str:
    t = run.segment_table
    parts = ['<section id="summary"><h2>Summary</h2>']
    crs = run.inputs.crs
    auth = crs.to_authority()
    crs_text = f"{crs.name}" + (f" ({auth[0]}:{auth[1]})" if auth else "")
    ls = getattr(run, "limit_set", None)
    facts = [("Config", Path(str(run.config.path)).name), ("CRS", crs_text),
             ("Frequency", f"{run.config.run.get('frequency_hz', '')} Hz"),
             ("Screening distance", f"{run.config.run.get('screening_distance_m', '')} m")]
    if ls is not None:
        facts += [("Limit set", f"{ls.name} — {ls.description}"),
                  ("Editions", "; ".join(ls.editions)),
                  ("Review threshold", f"utilization ≥ {ls.review_threshold:g}")]
    parts.append('<dl class="facts">' + "".join(f"<dt>{_esc(k)}</dt><dd>{_esc(v)}</dd>"
                                                for k, v in facts) + "</dl>")
    # counts by hazard class
    rows = []
    if "hazard_class" in t:
        seg_n = t["hazard_class"].value_counts()
        seg_km = t.groupby("hazard_class")["length_m"].sum() / 1000.0
        ast_n = (assets["hazard_class"].value_counts()
                 if assets is not None and "hazard_class" in assets else pd.Series(dtype=int))
        for k in HAZARD_CLASSES:
            rows.append(f"<tr><td>{_class_badge(k)}</td><td class='n'>{int(seg_n.get(k, 0))}</td>"
                        f"<td class='n'>{_num(seg_km.get(k, 0.0), 4)}</td>"
                        f"<td class='n'>{int(ast_n.get(k, 0))}</td></tr>")
        parts.append("<h3>Counts by hazard class</h3><div class='tablewrap'><table><thead><tr>"
                     "<th>Hazard class</th><th>Segments</th><th>Segment length [km]</th>"
                     f"<th>Assets</th></tr></thead><tbody>{''.join(rows)}</tbody></table></div>")
    if assets is not None and len(assets):
        top = assets.head(5)
        items = "".join(
            f"<li><b>{_esc(r.asset_id)}</b> ({_esc(r.asset_kind)}): worst utilization "
            f"{_num(r.worst_utilization)} {_class_badge(r.hazard_class)}, governed by "
            f"<code>{_esc(r.governing)}</code> at chainage {_num(r.worst_chainage_m / 1e3, 4)}"
            " km</li>" for r in top.itertuples())
        parts.append(f"<h3>Worst assets</h3><ol>{items}</ol>")
    # inputs
    recs = inputs if inputs is not None else _input_records(run, out_dir)
    if recs:
        body = "".join(f"<tr><td>{_esc(Path(r['path']).name)}</td>"
                       f"<td>{_esc(r.get('modified_utc', ''))}</td>"
                       f"<td><code>{_esc(str(r.get('sha256', ''))[:16])}</code></td></tr>"
                       for r in recs)
        parts.append("<h3>Inputs</h3><div class='tablewrap'><table><thead><tr><th>File</th>"
                     "<th>Modified (UTC)</th><th>SHA-256 (first 16 hex)</th></tr></thead>"
                     f"<tbody>{body}</tbody></table></div>")
    parts.append(_changes(run, previous))
    parts.append("</section>")
    return "".join(parts)


def _changes(run, previous: dict | None) -> str:
    out = ['<div id="changes"><h3>Change since the last run</h3>']
    changes = run.extra_tables.get("changes")
    if changes is None:
        changes = run.extra_tables.get("csv:changes.csv")
    if isinstance(changes, pd.DataFrame) and (len(changes) or previous):
        if previous:
            out.append(f"<p>Previous run finished {_esc(previous.get('finished_utc', '?'))}."
                       "</p>")
        if len(changes):
            frame = pd.DataFrame(changes.drop(columns="geometry", errors="ignore"))
            out.append(_table(frame.head(MAX_ROWS), list(frame.columns)))
            if len(frame) > MAX_ROWS:
                out.append(f"<p>{len(frame) - MAX_ROWS} more changes not shown.</p>")
        else:
            out.append("<p>No changes since the previous run.</p>")
    elif previous:
        out.append(f"<p>Previous run finished {_esc(previous.get('finished_utc', '?'))}.</p>")
        before = previous.get("counts", {}) or {}
        rows = []
        for k, now in run.counts.items():
            if k in before and isinstance(now, int | float) and isinstance(before[k], int | float):
                d = now - before[k]
                rows.append(f"<tr><td>{_esc(k)}</td><td class='n'>{_num(before[k])}</td>"
                            f"<td class='n'>{_num(now)}</td>"
                            f"<td class='n'>{'+' if d > 0 else ''}{_num(d)}</td></tr>")
        if rows:
            out.append("<div class='tablewrap'><table><thead><tr><th>Count</th><th>Previous</th>"
                       f"<th>Now</th><th>Change</th></tr></thead><tbody>{''.join(rows)}"
                       "</tbody></table></div>")
    else:
        out.append("<p>First run: no previous run record in the output folder.</p>")
    out.append("</div>")
    return "".join(out)


def _worst_exposures(run) -> pd.DataFrame:
    ex = pd.DataFrame(run.exposure_table.drop(columns="geometry"))
    t = run.segment_table
    if not len(ex) or "utilization" not in t:
        return ex
    s = pd.DataFrame({"asset_id": t["asset_id"].astype(str), "line_id": t["line_id"].astype(str),
                      "chainage_m": t["chainage_m"].to_numpy(float),
                      "utilization": t["utilization"].to_numpy(float)})
    m = ex[["exposure_id", "asset_id", "line_id", "start_chainage_m", "end_chainage_m"]].astype(
        {"asset_id": str, "line_id": str}).merge(s, on=["asset_id", "line_id"])
    m = m[(m["chainage_m"] >= m["start_chainage_m"] - 1e-6)
          & (m["chainage_m"] <= m["end_chainage_m"] + 1e-6)]
    worst = m.groupby("exposure_id")["utilization"].max().rename("worst_utilization")
    ex = ex.merge(worst, left_on="exposure_id", right_index=True, how="left")
    return ex.sort_values(["worst_utilization", "exposure_id"], ascending=[False, True],
                          kind="stable", na_position="last")


_ASSUMPTIONS = [
    "Steady-state phasors at the run frequency; |V| is the magnitude to remote earth.",
    "Earth-return coupling from Carson's equations (Sunde's surface form for buried assets),"
    " in homogeneous or two-layer soil (Sunde's layered kernel) per segment from the soil"
    " layer or the default; holiday density, foot resistance, electrodes and earth potential"
    " use the local (or top-layer) resistivity.",
    "Oblique exposures are split until the end separations differ by at most a factor of 3,"
    " each section taking the geometric-mean separation (ITU-T Directives practice).",
    "One earth fault at a time; each segment takes its worst case. Earth-wire screening is"
    " computed from the tower geometry.",
    "Touch voltage during a fault adds |V| of the asset and the earth potential rise near the"
    " faulted towers (hemisphere footing) as magnitudes: conservative, the phase is unknown.",
    "Assets respond as transmission lines with distributed sources; terminations and grounds"
    " as given, or the asset kind's defaults.",
    "Capacitive (electric-field) coupling only for above-ground assets.",
    "A ratio of 1 or more to a limit of the chosen set exceeds it; from the review threshold"
    " upwards a segment is flagged for review. Limit values follow the editions named above.",
]

_CSS = """
:root{--ink:#1f2328;--muted:#5b6470;--line:#d8dde3;--bg:#ffffff;--soft:#f5f7f9}
*{box-sizing:border-box}
body{margin:0;font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",
 "Liberation Sans",Arial,sans-serif;color:var(--ink);background:var(--bg)}
main{max-width:1180px;margin:0 auto;padding:18px 28px 48px}
h1{font-size:24px;margin:6px 0 2px}h2{font-size:19px;margin:30px 0 8px;padding-bottom:4px;
 border-bottom:2px solid var(--line)}h3{font-size:15px;margin:18px 0 6px}
.sub{color:var(--muted);margin:0 0 12px}
.caution{border:3px solid #b8322f;background:#fff4f2;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.caution strong{color:#8a1f1f;text-transform:uppercase;letter-spacing:.04em;margin-right:6px}
.alert{border:4px solid #8a1f1f;background:#ffe3de;padding:12px 16px;border-radius:6px;
 font-size:15px;margin:12px 0 8px}
.alert strong{display:block;color:#8a1f1f;font-size:18px;text-transform:uppercase;
 letter-spacing:.04em;margin-bottom:4px}
.alert ul{margin:6px 0 0 18px;padding:0}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:3px 16px;margin:8px 0}
dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}
.tablewrap{overflow-x:auto;margin:6px 0 12px}
table{border-collapse:collapse;font-size:12.5px;min-width:40%}
caption{text-align:left;color:var(--muted);padding:4px 0}
th,td{border-bottom:1px solid var(--line);padding:4px 8px;text-align:left;vertical-align:top}
td{white-space:nowrap}
th{background:var(--soft);font-weight:600}td.n{text-align:right;font-variant-numeric:tabular-nums}
.badge{display:inline-block;padding:0 7px;border-radius:9px;font-size:12px;color:#fff}
.badge.clear{background:#4f9a6b}.badge.review{background:#e2a72e;color:#1f1f1f}
.badge.exceeds{background:#b8322f}
figure{margin:10px 0 20px}figure svg{max-width:100%;height:auto;display:block}
figcaption{color:var(--muted);font-size:12.5px;margin-top:4px}
code{font-size:12px;background:var(--soft);padding:0 3px;border-radius:3px}
footer{color:var(--muted);font-size:12px;margin-top:36px;border-top:1px solid var(--line);
 padding-top:8px}
"""


def write_report(run, out_dir: Path, previous: dict | None = None,
                 max_profiles: int = MAX_PROFILES, max_rows: int = MAX_ROWS,
                 inputs: list[dict] | None = None) -> Path:
    """Write ``report.html`` for a finished run.

    Parameters
    ----------
    run : corridor.pipeline.Run
        A run through every stage (segment table with ``utilization``,
        ``hazard_class``, ``rank``; ``extra_tables["layer:assets"]``;
        ``limit_set`` and ``assessment`` from the assess stage).
        ``extra_tables["layer:sites"]`` (points with ``asset_id``,
        ``chainage_m`` [m] and optionally ``v_before_v``, ``v_after_v`` [V])
        and ``extra_tables["changes"]`` are drawn when present.
    out_dir : Path
        Output folder; ``run.json`` there, if present, supplies the input
        file dates and hashes.
    previous : dict, optional
        The previous run's ``run.json``, for the change summary.
    max_profiles : int, optional
        Cap on the number of profile plots (worst assets first).
    max_rows : int, optional
        Rows per ranked table.
    inputs : list of dict, optional
        Input files (``path``, ``sha256``, ``modified_utc``); default: from
        ``run.json`` in ``out_dir``, else hashed again.

    Returns
    -------
    Path
        The report file.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    ls = getattr(run, "limit_set", None)
    thr = ls.review_threshold if ls is not None else DEFAULT_REVIEW_THRESHOLD
    assets = run.extra_tables.get("layer:assets")
    assets_df = None if assets is None else pd.DataFrame(assets.drop(columns="geometry"))
    sites = run.extra_tables.get("layer:sites")
    sites_df = None if sites is None else pd.DataFrame(sites.drop(columns="geometry",
                                                                  errors="ignore"))
    t = run.segment_table
    now = datetime.now(UTC).isoformat(timespec="seconds")
    missing = _not_assessed(run)
    body = [f"<header><h1>Corridor screening report</h1><p class='sub'>"
            f"{_esc(Path(str(run.config.path)).name)} · written {now} · corridor {__version__}"
            "</p></header>",
            _rejected_lines_banner(run),
            _not_assessed_banner(missing),
            f'<div class="caution" role="alert"><strong>Caution</strong>{_esc(SAFETY_CAUTION)}'
            "</div>",
            _summary(run, out_dir, assets_df, previous, thr, inputs)]

    body.append('<section id="map"><h2>Overview map</h2><figure>')
    body.append(overview_map(run, thr))
    body.append(f"<figcaption>Power lines (dashed, by voltage), asset segments coloured by"
                f" utilization in the clear / review / exceeds bands (review from {thr:g},"
                f" exceeds from 1), grounding sites where proposed. Grid north and scale of"
                f" {_esc(run.inputs.crs.name)}.</figcaption></figure></section>")

    body.append('<section id="worst-assets"><h2>Worst assets</h2>')
    if assets_df is not None:
        cols = ["asset_rank", "asset_id", "asset_kind", "worst_utilization", "hazard_class",
                "governing", "worst_chainage_m", "worst_v_normal_v", "worst_v_fault_v",
                "worst_i_capacitive_short_ma", "length_over_limit_m", "length_m", "line_ids"]
        body.append(_table(assets_df.head(max_rows), cols,
                           f"{min(max_rows, len(assets_df))} of {len(assets_df)} assets, worst"
                           " first", km=("worst_chainage_m", "length_over_limit_m", "length_m")))
    else:
        body.append("<p>No assets table in this run.</p>")
    body.append("</section>")

    ex = _worst_exposures(run)
    body.append('<section id="worst-exposures"><h2>Worst exposures</h2>')
    body.append(_table(ex.head(max_rows), [
        "exposure_id", "asset_id", "asset_kind", "line_id", "line_voltage_kv",
        "worst_utilization", "start_chainage_m", "end_chainage_m", "parallel_length_m",
        "min_separation_m", "equivalent_separation_m", "crossings"],
        f"{min(max_rows, len(ex))} of {len(ex)} exposures (asset, power line, continuous run),"
        " by the worst utilization along them",
        km=("start_chainage_m", "end_chainage_m")))
    body.append("</section>")

    body.append('<section id="worst-segments"><h2>Worst segments</h2>')
    if "rank" in t:
        # only the worst rows are needed: rank a bounded head, not the whole table
        cols = [c for c in ("rank", "asset_id", "asset_kind", "chainage_m", "separation_m",
                            "line_id", "v_normal_v", "v_fault_v", "utilization", "governing",
                            "hazard_class") if c in t.columns]
        head = min(len(t), max_rows * SEGMENTS_PER_ASSET * 50)
        order = np.argsort(t["rank"].to_numpy(), kind="stable")[:head]
        ranked = pd.DataFrame(t[cols].iloc[order])
        top = ranked[ranked.groupby("asset_id", sort=False).cumcount() < SEGMENTS_PER_ASSET]
        top = top.head(max_rows)
        body.append(_table(top, ["rank", "asset_id", "asset_kind", "chainage_m", "separation_m",
                                 "line_id", "v_normal_v", "v_fault_v", "utilization",
                                 "governing", "hazard_class"],
                           f"{len(top)} of {len(t)} segments, worst first, at most"
                           f" {SEGMENTS_PER_ASSET} per asset", km=("chainage_m",)))
    body.append("</section>")

    body.append('<section id="profiles"><h2>Profiles of assets over a limit</h2>')
    if assets_df is not None and "worst_utilization" in assets_df:
        over = assets_df[assets_df["worst_utilization"].to_numpy(float) >= 1.0]
        groups = t.groupby("asset_id", sort=False).indices
        site_groups = (sites_df.groupby("asset_id").indices
                       if sites_df is not None and "asset_id" in sites_df else {})
        shown = over.head(max_profiles)
        if not len(over):
            body.append("<p>No asset exceeds a limit.</p>")
        for i, row in enumerate(shown.itertuples(index=False)):
            r = pd.Series(row._asdict())
            idx = groups.get(r["asset_id"])
            if idx is None or not len(idx):
                continue
            s_idx = site_groups.get(r["asset_id"])
            s_rows = sites_df.iloc[s_idx] if s_idx is not None else None
            crit = _criterion(run, r.get("governing", ""))
            desc = f" — {crit.description}" if crit is not None and crit.description else ""
            body.append(f'<figure class="profile" id="profile-{i + 1}">')
            body.append(profile_plot(run, r, np.asarray(idx), s_rows, f"corridor-profile-{i}"))
            body.append(f"<figcaption>{_esc(r['asset_id'])}: governing criterion"
                        f" <code>{_esc(r.get('governing', ''))}</code>{_esc(desc)}; limit drawn"
                        " from the limit set's permitted value per segment. Separation to the"
                        " nearest power line on the right axis.</figcaption></figure>")
        left_out = len(over) - len(shown)
        if left_out > 0:
            body.append(f"<p class='sub'>{left_out} more assets over a limit are not plotted"
                        f" (cap of {max_profiles}); see the assets layer.</p>")
    body.append("</section>")

    body.append(_rejected_section(run))
    body.append(_defaults_section(run))

    if ls is not None:
        unjudged = {r.get("criterion"): r for r in missing}
        crows = pd.DataFrame([{"criterion": c.name, "case": c.case, "quantity": c.quantity,
                               "applies to": ", ".join(c.applies_to),
                               "assessed": ("NOT ASSESSED" if c.name in unjudged else "yes"),
                               "needs": ", ".join(getattr(c, "needs", ())),
                               "source": c.source}
                              for c in ls.criteria])
        body.append('<section id="limits"><h2>Limit set criteria</h2>')
        body.append(_table(crows, list(crows.columns), f"{ls.name}: {len(crows)} criteria"))
        body.append("</section>")

    run_assumptions = list(_ASSUMPTIONS)
    extra_json = run.extra_tables.get("json", {}) if hasattr(run, "extra_tables") else {}
    if isinstance(extra_json, dict) and extra_json.get("normal_load_assumption"):
        run_assumptions.insert(1, str(extra_json["normal_load_assumption"]))
    body.append('<section id="assumptions"><h2>Method and assumptions</h2><ul>'
                + "".join(f"<li>{_esc(a)}</li>" for a in run_assumptions) + "</ul></section>")
    body.append(f"<footer>{_esc(SAFETY_CAUTION)}</footer>")

    doc = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
           "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
           f"<title>Corridor screening report — {_esc(Path(str(run.config.path)).stem)}</title>"
           f"<style>{_CSS}</style></head><body><main>{''.join(body)}</main></body></html>\n")
    path = out_dir / "report.html"
    path.write_text(doc, encoding="utf-8")
    log.info("report written to %s (%.0f kB)", path, len(doc) / 1024)
    return path
