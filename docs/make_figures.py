"""Draw the demo figures in docs/ from a finished demo run.

``python docs/make_figures.py [OUT_DIR]`` (default ``out/demo``) writes
``docs/demo_map.png`` (exposures on a map) and ``docs/demo_pipeline_profile.png``
(voltage along the Millbrook gas lateral).
"""

from __future__ import annotations

import sys
from pathlib import Path

import geopandas as gpd
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

HERE = Path(__file__).parent


def demo_map(out: Path, target: Path) -> None:
    gpkg = out / "screening.gpkg"
    src = Path(__file__).parents[1] / "sample_layers" / "brackenford_vale.gpkg"
    lines = gpd.read_file(src, layer="power_lines")
    ex = gpd.read_file(gpkg, layer="exposures")
    assets = gpd.read_file(gpkg, layer="assets")
    soil = gpd.read_file(src, layer="soil")
    grounds = gpd.read_file(src, layer="grounds")
    sites = gpd.read_file(gpkg, layer="sites")
    fig, ax = plt.subplots(figsize=(11, 6.5), dpi=110)
    soil.plot(ax=ax, column="RHO_OHM_M", cmap="Greys", alpha=0.18, edgecolor="none")
    for _, r in soil.iterrows():
        c = r.geometry.centroid
        ax.annotate(f"{r['ZONE']}\n{r['RHO_OHM_M']:g} Ω·m", (c.x, c.y + 5200), ha="center",
                    fontsize=7, color="0.35")
    for _, r in lines.iterrows():
        ax.plot(*r.geometry.xy, color="#7a1f5c" if r["KV"] > 200 else "#c26a00",
                lw=2.6 if r["KV"] > 200 else 1.8, label=f"{r['LINE_ID']} ({r['KV']:g} kV)")
    kinds = {"pipeline": "#1f5fa8", "fence": "#2e8b57", "rail": "#444444", "telecom": "#8a2be2"}
    for kind, color in kinds.items():
        sel = assets[assets["asset_kind"] == kind]
        sel.plot(ax=ax, color=color, lw=1.0, linestyle="--" if kind == "telecom" else "-")
        ax.plot([], [], color=color, lw=1.0, label=f"{kind}")
    ex.plot(ax=ax, color="#e8b400", lw=5, alpha=0.45, zorder=1)
    ax.plot([], [], color="#e8b400", lw=5, alpha=0.45, label="exposure (within 1 km)")
    for _, r in assets.iterrows():
        p = r.geometry.interpolate(0.5, normalized=True)
        ax.annotate(r["asset_id"], (p.x, p.y), fontsize=7, xytext=(3, 3),
                    textcoords="offset points")
    g = grounds[grounds["ITEM"] == "ground"]
    b = grounds[grounds["ITEM"] != "ground"]
    ax.scatter(g.geometry.x, g.geometry.y, marker="v", color="k", s=22, label="existing ground",
               zorder=5)
    ax.scatter(b.geometry.x, b.geometry.y, marker="|", color="r", s=90,
               label="insulating joint / gap", zorder=5)
    if len(sites):
        ax.scatter(sites.geometry.x, sites.geometry.y, marker="o", facecolor="none",
                   edgecolor="#d62728", s=40, label="proposed site", zorder=6)
    ax.set_aspect("equal")
    ax.set_title("Brackenford Vale demo corridor (invented): exposures and proposed sites")
    ax.set_xlabel("easting [m], EPSG:32615")
    ax.set_ylabel("northing [m]")
    ax.ticklabel_format(style="plain", useOffset=False)
    ax.legend(loc="lower right", fontsize=7, ncol=2, framealpha=0.9)
    fig.tight_layout()
    fig.savefig(target)
    plt.close(fig)


def pipeline_profile(out: Path, target: Path, asset_id: str = "MBL-12") -> None:
    seg = gpd.read_file(out / "screening.gpkg", layer="segments")
    seg = seg[seg["asset_id"] == asset_id].sort_values("chainage_m")
    sites = pd.read_csv(out / "grounding_sites.csv", comment="#")
    sites = sites[sites["asset_id"] == asset_id]
    x = (seg["chainage_m"] + seg["length_m"] / 2) / 1000.0
    fig, ax = plt.subplots(2, 1, figsize=(10, 6.5), dpi=110, sharex=True)
    ax[0].plot(x, seg["v_normal_v"], color="#1f5fa8", label="|V| normal load")
    ax[0].axhline(15.0, color="#1f5fa8", ls=":", lw=1, label="15 V steady state (NACE SP0177)")
    ax[0].set_ylabel("|V| to remote earth [V]")
    ax[0].legend(fontsize=8)
    ax[0].set_title(f"{asset_id}: voltage along the pipeline (demo, invented)")
    ax[1].plot(x, seg["v_fault_v"], color="#b22222", label="|V| worst earth fault")
    ax[1].set_ylabel("|V| to remote earth [V]")
    ax[1].set_xlabel("chainage [km]")
    for a in ax:
        a.grid(alpha=0.3)
    for c in sites["chainage_m"]:
        ax[1].axvline(c / 1000.0, color="0.5", lw=0.8, ls="--")
    sec = ax[1].twinx()
    sec.plot(x, seg["separation_m"], color="0.4", lw=0.8, label="separation to nearest line")
    sec.set_ylabel("separation [m]")
    sec.set_yscale("log")
    ax[1].plot([], [], color="0.5", ls="--", lw=0.8, label="proposed grounding site")
    ax[1].plot([], [], color="0.4", lw=0.8, label="separation (right axis)")
    ax[1].legend(fontsize=8, loc="upper right")
    fig.tight_layout()
    fig.savefig(target)
    plt.close(fig)


if __name__ == "__main__":
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else Path("out/demo")
    demo_map(out, HERE / "demo_map.png")
    pipeline_profile(out, HERE / "demo_pipeline_profile.png")
    print("wrote docs/demo_map.png, docs/demo_pipeline_profile.png")
