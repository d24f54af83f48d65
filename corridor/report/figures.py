"""The report's figures: the overview map and the |V|-along-chainage profiles (inline SVG)."""


from __future__ import annotations

import io
import logging
import re
import textwrap
from typing import TYPE_CHECKING

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

if TYPE_CHECKING:
    from matplotlib.typing import RcKeyType

from corridor.io.styles import (
    HAZARD_COLOURS,
    SITE_COLOUR,
    SITE_OUTLINE,
    VOLTAGE_BANDS,
    utilization_bands,
)
from corridor.limits.limit_sets import HAZARD_CLASSES
from corridor.report.deciding import (
    criterion_of,
    permitted_at,
    plain_criterion,
    quantity_title,
)
from corridor.report.html import MAP_LABELS, PROFILE_POINTS, RASTER_ABOVE, fmt_num, unit_of

log = logging.getLogger(__name__)


_NORMAL_COLOUR = "#2b6cb0"
_FAULT_COLOUR = "#c05621"
_LIMIT_COLOUR = "#1a1a1a"
_JUDGED_COLOUR = "#6b46c1"
_SEPARATION_COLOUR = "#8a8a8a"

_RC: dict[RcKeyType, object] = {
    "svg.fonttype": "none",  # text stays text: small files, crisp in the browser
    "font.family": "sans-serif",
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.spines.top": False,
    "svg.image_inline": True,
}

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


def _band_runs(seg, util, edges, tolerance_m: float, xy: np.ndarray | None = None):
    """Polylines of consecutive segments of one asset part in one utilization band.

    Drawing runs instead of single segments keeps the map's path count near
    the number of assets (a whole network has millions of segments). Vertices
    closer than ``tolerance_m`` along a run are thinned; each run keeps its
    ends. ``xy``: the segments' coordinates when already read. Returns the
    vertex arrays and each run's highest utilization.
    """
    n = len(seg)
    if n == 0:
        return [], np.zeros(0)
    if xy is None:
        xy = shapely.get_coordinates(seg.geometry.to_numpy())
    if len(xy) != 2 * n:  # not all simple two-point segments: draw them one by one
        lines, owner = _line_coords(seg.geometry.to_numpy(), tolerance_m)
        return lines, util[owner]
    xy = xy.reshape(n, 2, 2)
    band = np.digitize(np.nan_to_num(util, nan=0.0), np.asarray(edges[1:-1], float))
    asset = pd.factorize(seg["asset_id"])[0]  # only equality of neighbours is used
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
    sites = run.sites
    if not len(lines.geometry) and not len(seg.geometry):
        return "<p>No geometry to draw.</p>"
    # the segments' bounds from their coordinates, which the map reads anyway
    seg_xy = shapely.get_coordinates(seg.geometry.to_numpy())
    bounds = [lines.geometry.total_bounds] if len(lines.geometry) else []
    if len(seg.geometry):
        bounds.append(seg_xy.min(axis=0).tolist() + seg_xy.max(axis=0).tolist()
                      if len(seg_xy) and np.isfinite(seg_xy).all()
                      else seg.geometry.total_bounds)
    b = np.array(bounds)
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
        scoords, svalue = _band_runs(seg, util, edges, span / 1800.0, seg_xy)
        if len(scoords):
            n_vertices = sum(len(c) for c in scoords)
            coll = LineCollection(scoords, cmap=cmap, norm=norm, linewidths=2.6, zorder=3,
                                  capstyle="round", rasterized=n_vertices > RASTER_ABOVE)
            coll.set_array(svalue)
            ax.add_collection(coll)
            cb = fig.colorbar(coll, cax=cax, spacing="uniform", ticks=edges[:-1])
            cb.ax.set_yticklabels([f"{e:g}" for e in edges[:-1]])
            cb.set_label("ratio to the limit [-]  (clear · review · exceeds)")
        if sites is not None and len(sites):
            pts = shapely.get_coordinates(shapely.centroid(sites.geometry.to_numpy()))
            ax.scatter(pts[:, 0], pts[:, 1], marker="^", s=70, c=SITE_COLOUR,
                       edgecolors=SITE_OUTLINE, linewidths=1.2, zorder=5)
            handles.append(Line2D([], [], marker="^", ls="", mfc=SITE_COLOUR, mec=SITE_OUTLINE,
                                  ms=8, label="grounding site"))
        for k in HAZARD_CLASSES:
            handles.append(Line2D([], [], color=HAZARD_COLOURS[k], lw=2.6, label=f"asset: {k}"))
        assets = run.assets
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


def _governing_values(run, crit, idx: np.ndarray):
    """Judged quantity and permitted value of one criterion on segments ``idx``.

    Both as the run computed them: the quantity from the segment table, the
    permitted value (which may vary per segment: clearing time, soil, coating)
    from ``run.limits_table`` (:func:`corridor.pipeline.limits_frame`), matched by
    asset and segment index. Without that table, the permitted value is the
    quantity over its ratio.
    """
    if crit is None:
        return None, None
    t = run.segment_table  # two columns at the rows, not every column (iloc of the table)
    ratio_col = f"ratio_{crit.name}"
    r = t[ratio_col].to_numpy(float)[idx] if ratio_col in t else None
    permitted = permitted_at(run, crit, idx)
    if crit.quantity in t:
        q = np.abs(t[crit.quantity].to_numpy(float)[idx])
    elif r is not None:  # a quantity derived in the assess step: ratio times permitted
        q = r * permitted
    else:
        return None, None
    if not np.isfinite(permitted).any() and r is not None:
        ok = np.isfinite(r) & (r > 0)
        np.divide(q, r, out=permitted, where=ok)
    return q, permitted


def _after_rows(run, after: pd.DataFrame) -> dict:
    """Row positions of each asset in the table after grounding, computed once per table.

    Kept on the run with the table it came from, so that each profile reads
    its asset's rows without a comparison over the whole table.
    """
    cached = getattr(run, "_report_after_rows", None)
    if cached is not None and cached[0] is after:
        return cached[1]
    rows = after.groupby("asset_id", sort=False).indices
    try:
        run._report_after_rows = (after, rows)
    except AttributeError:  # a run that takes no new attributes: compute again next time
        pass
    return rows


def _after_grounding(run, asset: pd.Series, idx: np.ndarray, sites: pd.DataFrame | None):
    """|V| normal and fault on segments ``idx`` with the proposed grounds, or None."""
    after = getattr(run, "segment_table_after_grounding", None)
    if (after is None or sites is None or not len(sites)
            or not {"asset_id", "segment_index", "v_normal_v", "v_fault_v"} <= set(after.columns)):
        return None
    if "ground_resistance_ohm" in sites and not sites["ground_resistance_ohm"].notna().any():
        return None  # no ground proposed here: the response is unchanged
    rows = _after_rows(run, after).get(asset["asset_id"])
    if rows is None or not len(rows):
        return None
    a = after.iloc[rows].drop_duplicates("segment_index")
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
    crit = criterion_of(run, asset.get("governing", ""))
    q_name = crit.quantity if crit is not None else ""
    q_title = quantity_title(q_name) if q_name else ""
    clearing = t["clearing_time_s"].to_numpy(float)[idx] if "clearing_time_s" in t else None
    finite = clearing[np.isfinite(clearing)] if clearing is not None else np.zeros(0)
    # one clearing time along the asset: name it; several: "at the clearing time"
    t_worst = float(finite[0]) if len(finite) and np.all(finite == finite[0]) else None
    limit_label = _wrap("limit: " + plain_criterion(run, asset.get("governing", ""), t_worst))
    q_vals, permitted = _governing_values(run, crit, idx)
    is_voltage = unit_of(q_name) == "V" or q_name.endswith("_v")
    extra = q_vals if (q_vals is not None and q_name not in ("v_normal_v", "v_fault_v")) else None
    lim = permitted if permitted is not None else np.full(len(idx), np.nan)
    qv = extra if extra is not None else np.full(len(idx), np.nan)
    after = _after_grounding(run, asset, idx, sites)
    an, af = after if after is not None else (np.full(len(idx), np.nan),) * 2
    scanned = ("fault_position_m" in t
               and bool(np.isfinite(t["fault_position_m"].to_numpy(float)[idx]).any()))
    fault_label = _wrap("|V| during earth fault: worst of the scanned fault positions"
                        if scanned else "|V| during earth fault: worst case")
    xs, (vn, vf, sep, qv, an, af), (lim,) = _envelope(x_km, [vn, vf, sep, qv, an, af], [lim],
                                                      PROFILE_POINTS)
    two_panels = extra is not None and not is_voltage

    with mpl.rc_context({**_RC, "svg.hashsalt": salt}):
        fig = _figure(9.5, 4.6 if two_panels else 3.6)
        if two_panels:
            ax, axq = fig.subplots(2, 1, sharex=True, height_ratios=(2.2, 1.0))
            fig.subplots_adjust(left=0.08, right=0.64, top=0.93, bottom=0.10, hspace=0.12)
        else:
            ax, axq = fig.add_subplot(), None
            fig.subplots_adjust(left=0.08, right=0.64, top=0.90, bottom=0.14)
        ax.plot(xs, vn, color=_NORMAL_COLOUR, lw=1.4, label="|V| under normal load")
        ax.plot(xs, vf, color=_FAULT_COLOUR, lw=1.4, label=fault_label)
        series = [vn, vf]
        if after is not None:
            ax.plot(xs, an, color=_NORMAL_COLOUR, lw=0.9, alpha=0.55, ls=(0, (4, 1.5)),
                    label="|V| normal load, with proposed grounds")
            ax.plot(xs, af, color=_FAULT_COLOUR, lw=0.9, alpha=0.55, ls=(0, (4, 1.5)),
                    label="|V| earth fault, with proposed grounds")
            series += [an, af]
        if is_voltage and crit is not None:
            if extra is not None:
                ax.plot(xs, qv, color=_JUDGED_COLOUR, lw=1.0, ls="--",
                        label=_wrap(f"{q_title}: the deciding quantity"))
                series.append(qv)
            if np.isfinite(lim).any():
                ax.plot(xs, lim, color=_LIMIT_COLOUR, lw=1.3, ls="-.", drawstyle="steps-mid",
                        label=limit_label)
                series.append(lim)
        vals = np.concatenate([s[np.isfinite(s) & (s > 0)] for s in series])
        if len(vals) and vals.max() / max(vals.min(), 1e-300) > 100.0:
            ax.set_yscale("log")
            _quiet_log_axis(ax.yaxis)
        ax.set_ylabel("voltage [V]")
        ax.grid(True, which="major", color="#e5e5e5", lw=0.6)
        ax2 = ax.twinx()
        ax2.spines["right"].set_visible(True)
        ax2.plot(xs, sep, color=_SEPARATION_COLOUR, lw=0.9, ls=":",
                 label="separation to the nearest power line")
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
                                   label="voltage at the site before its ground"),
                            Line2D([], [], marker="o", ls="", mfc=SITE_OUTLINE,
                                   mec=SITE_OUTLINE, label="voltage at the site after it")]
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.13, 1.0), fontsize=7.5,
                  frameon=False)
        if axq is not None:
            unit = unit_of(q_name)
            axq.plot(xs, qv, color=_FAULT_COLOUR if crit.case == "fault" else _NORMAL_COLOUR,
                     lw=1.2, label=_wrap(f"{q_title}: the deciding quantity"))
            if np.isfinite(lim).any():
                axq.plot(xs, lim, color=_LIMIT_COLOUR, lw=1.3, ls="-.", drawstyle="steps-mid",
                         label=limit_label)
            pos = qv[np.isfinite(qv) & (qv > 0)]
            if len(pos) and pos.max() / max(pos.min(), 1e-300) > 100.0:
                axq.set_yscale("log")
                _quiet_log_axis(axq.yaxis)
            axq.set_ylabel(_wrap(f"{q_title} [{unit}]" if unit else f"{q_title} [-]", 24))
            axq.grid(True, color="#e5e5e5", lw=0.6)
            axq.legend(loc="upper left", bbox_to_anchor=(1.13, 1.0), fontsize=7.5,
                       frameon=False)
            axq.set_xlabel("chainage along the asset [km]")
        else:
            ax.set_xlabel("chainage along the asset [km]")
        ax.set_title(f"{asset['asset_id']} ({asset.get('asset_kind', '')}): worst ratio"
                     f" {fmt_num(asset.get('worst_utilization', np.nan))} to the limit",
                     loc="left")
        svg = _svg(fig)
    return svg


def _wrap(text: str, width: int = 40) -> str:
    """A legend label broken into lines of at most ``width`` characters."""
    return textwrap.fill(text, width)
