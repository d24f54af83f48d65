"""The typed result of a screening run: every table the outputs are written from.

:func:`corridor.pipeline.screen` computes a :class:`corridor.compute.Run`
(the typed stage record, for the steps) and :func:`result_of` turns it into a
:class:`Result`, from which :mod:`corridor.io.write` writes every output file.
Where each column is computed is named field by field below (and drawn in
DEVELOPERS.md, "Architecture").
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import geopandas as gpd
import pandas as pd

if TYPE_CHECKING:
    from corridor.compute import Run


@dataclass
class Result:
    """Every output table of one screening run.

    Attributes
    ----------
    segments : GeoDataFrame
        One row per asset segment (``segments`` layer). Geometry values
        (``line_id`` .. ``soil_resistivity_ohm_m``):
        :func:`corridor.pipeline.segment_frame`; induced EMF and screening:
        ``steps/couple.py``; voltages and currents (``v_normal_v``,
        ``v_fault_v``, ...): ``steps/respond.py``; ratios, ``utilization``,
        ``governing``, ``hazard_class``: ``steps/assess.py`` through the limit
        set; ``segment_id``: :func:`corridor.pipeline.finalize`; ``rank``:
        ``steps/__init__.py`` (``stage_rank``).
    exposures : GeoDataFrame
        One row per (asset, power line, continuous run) (``exposures`` layer,
        ``exposures.csv``): :func:`corridor.pipeline.exposure_frame`.
    hazards : GeoDataFrame or None
        Runs of segments at or above the review threshold (``hazards`` layer):
        ``steps/report_tables.py``.
    assets : GeoDataFrame or None
        One row per asset, its worst values (``assets`` layer):
        ``steps/report_tables.py``.
    sites : GeoDataFrame or None
        Proposed grounding sites as points (``sites`` layer): ``steps/ground.py``.
    grounding_sites : DataFrame or None
        The same sites as a table (``grounding_sites.csv``): ``steps/ground.py``.
    after_grounding : GeoDataFrame or None
        Segment voltages with the proposed grounds in place (not written; the
        report's profiles): ``steps/ground.py``.
    limits : DataFrame or None
        Permitted value of every criterion per segment (not written; the
        report's profiles present it): :func:`corridor.pipeline.limits_frame`
        from the assess step's evaluation.
    changes : DataFrame or None
        Rows of ``changes.csv``: :func:`corridor.changes.compare`.
    rejected : DataFrame
        Rows of ``rejected.csv``: :class:`corridor.io.layers.Rejected`.
    record : dict
        Entries of ``run.json`` the stages add (``changes``, ``inputs_state``,
        ``not_assessed``, ``rejected_power_lines``, ``defaults_used``,
        ``input_fingerprint``); :func:`corridor.io.write.write_outputs` adds
        the run-wide ones.
    power_lines : GeoDataFrame
        The power lines as the run used them (``power_lines`` layer): the
        canonical fields after [line_defaults] filled missing values
        (:func:`corridor.io.layers.read_inputs`), so a map shows what causes
        each hazard.
    extra_layers, extra_csv : dict
        Layers and CSV files a plugin stage added (name -> table).
    """

    segments: gpd.GeoDataFrame
    exposures: gpd.GeoDataFrame
    rejected: pd.DataFrame
    power_lines: gpd.GeoDataFrame
    hazards: gpd.GeoDataFrame | None = None
    assets: gpd.GeoDataFrame | None = None
    sites: gpd.GeoDataFrame | None = None
    grounding_sites: pd.DataFrame | None = None
    after_grounding: gpd.GeoDataFrame | None = None
    limits: pd.DataFrame | None = None
    changes: pd.DataFrame | None = None
    record: dict = field(default_factory=dict)
    extra_layers: dict[str, gpd.GeoDataFrame] = field(default_factory=dict)
    extra_csv: dict[str, pd.DataFrame] = field(default_factory=dict)

    def layers(self) -> dict[str, gpd.GeoDataFrame]:
        """The layers of ``screening.gpkg`` (and the other formats), in writing order."""
        out = {"exposures": self.exposures, "segments": self.segments}
        for name, table in (("sites", self.sites), ("hazards", self.hazards),
                            ("assets", self.assets), ("power_lines", self.power_lines),
                            *self.extra_layers.items()):
            if isinstance(table, gpd.GeoDataFrame):
                out[name] = table
        return out

    def csv_files(self) -> dict[str, pd.DataFrame]:
        """The CSV files by file name, without geometry (``rejected.csv`` .. ``changes.csv``)."""
        out = {"exposures.csv": self.exposures, "rejected.csv": self.rejected}
        for name, table in (("grounding_sites.csv", self.grounding_sites),
                            ("changes.csv", self.changes), *self.extra_csv.items()):
            if table is not None:
                out[name] = table
        return {k: pd.DataFrame(v.drop(columns="geometry", errors="ignore"))
                for k, v in out.items()}


def result_of(run: Run) -> Result:
    """The typed result of a finished run.

    Every table comes from a typed field of the run; only a plugin step's
    ``layer:<name>`` / ``csv:<file>`` entries in ``Run.extra_tables`` (the plugin
    hook) become the extra layers and CSV files.
    """
    layers = {k.split(":", 1)[1]: v for k, v in run.extra_tables.items()
              if k.startswith("layer:") and isinstance(v, gpd.GeoDataFrame)}
    csvs = {k.split(":", 1)[1]: v for k, v in run.extra_tables.items()
            if k.startswith("csv:") and isinstance(v, pd.DataFrame)}
    return Result(
        segments=run.segment_table, exposures=run.exposure_table,
        rejected=run.inputs.rejected.frame(),
        hazards=run.hazards, assets=run.assets,
        sites=run.sites, grounding_sites=run.grounding_sites,
        after_grounding=run.segment_table_after_grounding, limits=run.limits_table,
        changes=run.changes, record=dict(run.record), power_lines=run.inputs.lines,
        extra_layers=layers, extra_csv=csvs)
