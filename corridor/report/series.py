"""Report section of a run with a load time series (docs/methods.md §15).

Shows the series (file, grid, period), the ISO 18086 clause the averaged AC
current density is judged by, the assets with the most hours above a
steady-state limit, a duration curve of the worst assets' peak normal-load
voltage, and every problem the series had (rejected rows, filled gaps).
"""

from __future__ import annotations

import logging

import matplotlib as mpl
import numpy as np
import pandas as pd

from corridor.report.figures import _RC, _figure, _svg
from corridor.report.html import MAX_ROWS, esc, html_table

log = logging.getLogger(__name__)

__all__ = ["series_section", "duration_curve_plot"]

#: Problems of the series listed in the report at most (run.json has them all).
MAX_PROBLEMS = 50
_COLOURS = ("#2b6cb0", "#c05621", "#2f855a", "#6b46c1", "#b7791f", "#97266d", "#4a5568")


def duration_curve_plot(curves: pd.DataFrame, limit_v: float | None, salt: str) -> str:
    """Inline SVG: hours during which each asset's peak voltage is exceeded.

    Parameters
    ----------
    curves : DataFrame
        ``asset_id``, ``hours_exceeded_h``, ``v_normal_peak_v`` (the
        ``load_series_curves.csv`` rows), assets in the order to draw.
    limit_v : float or None
        A steady-state voltage limit to draw [V].
    salt : str
        SVG id salt (unique per figure of the report).
    """
    with mpl.rc_context({**_RC, "svg.hashsalt": salt}):
        fig = _figure(9.5, 3.4)
        ax = fig.add_subplot()
        fig.subplots_adjust(left=0.08, right=0.70, top=0.92, bottom=0.15)
        for i, (asset, rows) in enumerate(curves.groupby("asset_id", sort=False)):
            ax.plot(rows["hours_exceeded_h"].to_numpy(float),
                    rows["v_normal_peak_v"].to_numpy(float), drawstyle="steps-post",
                    color=_COLOURS[i % len(_COLOURS)], lw=1.4, label=str(asset))
        if limit_v is not None and np.isfinite(limit_v):
            ax.axhline(limit_v, color="#1a1a1a", lw=1.2, ls="-.", label=f"limit {limit_v:g} V")
        ax.set_xlabel("hours during which the voltage is reached or exceeded [h]")
        ax.set_ylabel("peak |V| on the asset [V]")
        ax.set_xlim(left=0.0)
        ax.set_ylim(bottom=0.0)
        ax.grid(True, color="#e5e5e5", lw=0.6)
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False, fontsize=8)
        return _svg(fig)


def _voltage_limit(run) -> float | None:
    ls = getattr(run, "limit_set", None)
    permitted = (getattr(run, "assessment", None) or {}).get("permitted", {})
    for c in getattr(ls, "criteria", ()):
        if c.case == "normal" and c.quantity == "v_normal_v" and c.name in permitted:
            values = np.asarray(permitted[c.name], float)
            values = values[np.isfinite(values)]
            if values.size:
                return float(values.min())
    return None


def series_section(run) -> str:
    """The ``Load time series`` section (empty string when the run has no series)."""
    record = getattr(run, "record", None) or {}
    info = record.get("load_series") if isinstance(record, dict) else None
    if not info:
        return ""
    out = ['<section id="load-series"><h2>Load time series</h2>']
    step_h = f"{float(info['step_h']):g}"
    period_h = f"{float(info['period_h']):g}"
    out.append(
        f"<p>{esc(info['steps'])} steps of {esc(step_h)} h from"
        f" {esc(info['start_utc'])} to {esc(info['end_utc'])}"
        f" ({esc(info['rows_used'])} of {esc(info['rows_read'])} rows used), file"
        f" <code>{esc(info['path'])}</code>. Voltages at every step come from each circuit's"
        " unit response by superposition (docs/methods.md §15). Hours above limit count the"
        " steps at which a segment reaches a steady-state limit"
        f" ({esc(', '.join(info['criteria_over_time']))}); the AC current density is averaged"
        f" over {esc(period_h)} h ({esc(info['averaging'])} windows) and the"
        f" worst mean judged by {esc(info['iso18086'])}.</p>")
    if info.get("criteria_not_over_time"):
        out.append("<p><strong>Judged on the snapshot only, not step by step:</strong> "
                   f"{esc(', '.join(info['criteria_not_over_time']))}.</p>")
    assets = getattr(run, "assets", None)
    if assets is not None and "hours_above_limit_h" in assets.columns:
        a = pd.DataFrame(assets.drop(columns="geometry", errors="ignore"))
        order = np.lexsort((a["asset_id"].to_numpy(dtype=str),
                            -np.nan_to_num(a["v_normal_peak_v"].to_numpy(float), nan=-1.0),
                            -np.nan_to_num(a["hours_above_limit_h"].to_numpy(float), nan=-1.0)))
        a = a.iloc[order]
        out.append(html_table(a.head(MAX_ROWS), [
            "asset_id", "asset_kind", "hours_above_limit_h", "v_normal_peak_v",
            "v_normal_peak_utc", "worst_v_normal_v", "ac_density_mean_max_a_per_m2",
            "iso18086_mean_ratio"],
            f"{min(MAX_ROWS, len(a))} of {len(a)} assets, most hours above a steady-state"
            " limit first (empty: no steady-state criterion applies to the kind)"))
    curves = getattr(run, "extra_tables", {}).get("csv:load_series_curves.csv")
    if curves is not None and len(curves):
        out.append("<figure>")
        out.append(duration_curve_plot(curves, _voltage_limit(run), "corridor-series-curve"))
        out.append("<figcaption>Duration curve of the peak normal-load voltage of the worst"
                   " assets: for each voltage, the hours of the series during which the"
                   " asset's highest segment voltage reaches it. Also in"
                   " load_series_curves.csv.</figcaption></figure>")
    problems = info.get("problems") or []
    if problems:
        rows = pd.DataFrame(problems[:MAX_PROBLEMS])
        out.append(html_table(rows, ["file", "row", "field", "action", "reason"],
                              f"{min(MAX_PROBLEMS, len(problems))} of {len(problems)} problems"
                              " of the series (all in run.json, load_series.problems)"))
    else:
        out.append("<p>The series had no problems: every row was used and no step is"
                   " missing.</p>")
    out.append("</section>")
    return "".join(out)
