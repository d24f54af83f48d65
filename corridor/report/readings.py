"""The report's readings section: measured against predicted, and the anomalies.

Drawn when the run compared readings (``[readings]``, docs/methods.md §17): one
scatter of measured against predicted voltage on log axes with the 1:1 line and
the anomaly band around it, a marker per asset; the per-asset bias, spread and
count; the table of anomalies with their likely causes; and the readings that
could not be compared, with the reason.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from matplotlib.ticker import FuncFormatter, NullLocator

from corridor.report.figures import _figure, _plain_number, _svg
from corridor.report.html import esc, html_table

log = logging.getLogger(__name__)

_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_ANOMALY_COLOUR = "#c53030"


def scatter(frame: pd.DataFrame, threshold: float) -> str:
    """Measured against predicted voltage per asset, log axes, with the 1:1 line (SVG)."""
    ok = frame[np.isfinite(frame["log_residual"].to_numpy(float))]
    fig = _figure(6.0, 4.6)
    ax = fig.add_axes((0.12, 0.12, 0.62, 0.8))
    pred = ok["predicted_v"].to_numpy(float)
    meas = ok["measured_v"].to_numpy(float)
    lo = float(min(pred.min(), meas.min())) / 1.5
    hi = float(max(pred.max(), meas.max())) * 1.5
    line = np.array([lo, hi])
    ax.plot(line, line, color="#1a1a1a", lw=1.0, label="1:1")
    band = float(np.exp(threshold))
    ax.fill_between(line, line / band, line * band, color="#cbd5e0", alpha=0.5, lw=0,
                    label=f"within x{band:.2g}")
    for k, (aid, g) in enumerate(ok.groupby(ok["asset_id"].astype(str), sort=True)):
        flag = g["anomaly"].astype(bool).to_numpy()
        m = _MARKERS[k % len(_MARKERS)]
        ax.scatter(g["predicted_v"][~flag], g["measured_v"][~flag], marker=m, s=26,
                   label=str(aid), zorder=3)
        if flag.any():
            ax.scatter(g["predicted_v"][flag], g["measured_v"][flag], marker=m, s=60,
                       facecolors="none", edgecolors=_ANOMALY_COLOUR, linewidths=1.6,
                       zorder=4, label=f"{aid}: anomaly")
    for axis, setter in ((ax.xaxis, ax.set_xscale), (ax.yaxis, ax.set_yscale)):
        setter("log")
        axis.set_major_formatter(FuncFormatter(_plain_number))
        axis.set_minor_locator(NullLocator())
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_xlabel("predicted |V| [V]")
    ax.set_ylabel("measured |V| [V]")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False, fontsize=8)
    return _svg(fig)


def readings_section(run) -> str:
    """The report's readings section ('' when the run compared no readings)."""
    tables = getattr(run, "extra_tables", {}) or {}
    frame = tables.get("csv:reconciliation.csv")
    if frame is None:
        return ""
    cfg_readings = getattr(run.config, "readings", None) or {}
    threshold = float(cfg_readings.get("anomaly_log_residual", 0.35))
    record = (getattr(run, "record", {}) or {}).get("readings", {})
    cal = record.get("calibration")
    out = ['<section id="readings"><h2>Readings against the model</h2>',
           f"<p>{len(frame)} readings from {esc(record.get('layer', ''))};"
           f" {int(np.isfinite(frame['log_residual'].to_numpy(float)).sum())} compared with the"
           " normal-load voltage of their segment at the line current of their time (where the"
           " reading gives it; otherwise at the lines' load attributes, which makes the"
           " comparison approximate). "
           + (f"This run uses the calibration {esc(cal)}." if cal else
              "This run uses no calibration (`corridor calibrate` fits one).")
           + f" An anomaly is a reading off the model by more than x{np.exp(threshold):.2g}"
           " (|ln(measured/predicted)| above"
           f" {threshold:g}).</p>"]
    if np.isfinite(frame["log_residual"].to_numpy(float)).any():
        out.append("<figure>" + scatter(frame, threshold) + "<figcaption>Measured against"
                   " predicted voltage per asset, log axes; the 1:1 line and the band within"
                   " which a reading is no anomaly. Ringed: anomalies.</figcaption></figure>")
    summary = tables.get("csv:reconciliation_assets.csv")
    if summary is not None and len(summary):
        out.append(html_table(summary, ["asset_id", "readings", "bias_ratio", "bias_log",
                                        "spread_log", "anomalies"],
                              "Per asset: bias (mean of ln(measured/predicted), and as a"
                              " ratio), spread (standard deviation) and count"))
    anomalies = frame[frame["anomaly"].astype(bool)]
    if len(anomalies):
        out.append(html_table(anomalies, ["reading_id", "asset_id", "chainage_m",
                                          "measured_v", "predicted_v", "ratio",
                                          "likely_cause"],
                              f"{len(anomalies)} anomal{'y' if len(anomalies) == 1 else 'ies'}"
                              " and their likely causes", km=("chainage_m",)))
    else:
        out.append("<p>No anomalies.</p>")
    left = frame[frame["status"] != "placed"]
    if len(left):
        out.append(html_table(left, ["reading_id", "status", "reason"],
                              f"{len(left)} readings not compared, and why"))
    out.append("</section>")
    return "".join(out)
