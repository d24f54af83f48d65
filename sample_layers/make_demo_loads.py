"""Write the invented one-week hourly load series of the demo lines (brackenford_vale_loads.csv).

Run from the repository root: ``python sample_layers/make_demo_loads.py``. The
shape is invented: a daily cycle (low before dawn, high in the early evening),
a lighter weekend, circuit 2 of the double-circuit line a little below
circuit 1, and one afternoon of heavy transfer on VPC-345-A.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

OUT = Path(__file__).with_name("brackenford_vale_loads.csv")


def build() -> pd.DataFrame:
    """The demo series: 7 days × 24 h, three circuits."""
    hours = np.arange(7 * 24)
    times = pd.Timestamp("2026-07-06T00:00:00Z") + pd.to_timedelta(hours, unit="h")
    hour = hours % 24
    day = hours // 24
    daily = 0.65 + 0.35 * np.clip(np.sin((hour - 5) / 24 * 2 * np.pi), -1, 1) ** 2 * (hour >= 5)
    weekend = np.where(day >= 5, 0.8, 1.0)
    rows = []
    for line, circuit, peak_a in (("VPC-345-A", 1, 1150.0), ("VPC-345-A", 2, 1050.0),
                                  ("VPC-138-B", 0, 700.0)):
        current = peak_a * daily * weekend
        if line == "VPC-345-A":  # an afternoon of heavy transfer on day 3
            current = np.where((day == 2) & (hour >= 13) & (hour <= 18), current * 1.35, current)
        for t, i in zip(times, current, strict=True):
            rows.append({"timestamp": t.strftime("%Y-%m-%dT%H:%M:%SZ"), "line_id": line,
                         "circuit": circuit if circuit else "", "current_a": round(float(i), 1)})
    return pd.DataFrame(rows)


if __name__ == "__main__":
    build().to_csv(OUT, index=False)
    print(f"wrote {OUT}")
