"""The local backend: the whole compute in this process.

This is :func:`corridor.pipeline.compute` itself; the backend registry
(:mod:`corridor.backends`) hands it out for ``run.backend = "local"``.
"""

from __future__ import annotations

from pathlib import Path

from corridor.config import Config
from corridor.io.layers import Inputs


def compute_local(cfg: Config, inputs: Inputs, stages: dict | None = None,
                  work_dir: Path | None = None):
    """Exposure geometry and every per-asset stage, in this process.

    Parameters
    ----------
    cfg : Config
    inputs : Inputs
        Validated inputs (:func:`corridor.io.layers.read_inputs`).
    stages : dict, optional
        Per-asset stages, name -> ``fn(run)`` (:func:`corridor.steps.asset_stages`).
    work_dir : Path, optional
        Unused; accepted so that every backend has one signature.

    Returns
    -------
    corridor.pipeline.Run
    """
    from corridor.pipeline import compute

    return compute(cfg, inputs, stages)
