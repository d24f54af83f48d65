"""Where the per-asset compute runs: in this process or on a Dask cluster.

``run.backend`` picks an entry of :data:`BACKENDS`:

``local`` (default)
    :func:`corridor.backends.local.compute_local`, i.e.
    :func:`corridor.pipeline.compute` in this process.
``dask``
    :func:`corridor.backends.dask_backend.compute_dask`: the assets are cut
    into spatial partitions of whole assets, each partition is computed by
    the same :func:`corridor.pipeline.compute` on a ``dask.distributed``
    worker, and the per-asset tables are merged in input order. Needs the
    ``dask`` extra (``pip install 'corridor[dask]'``).

Both give the same rows: per-asset results do not depend on which other
assets are in the run (:func:`corridor.pipeline.subset_inputs`).
"""

from __future__ import annotations

import dataclasses
import functools
import logging
from pathlib import Path
from types import MappingProxyType

from corridor.config import RUN_SETTINGS, Config
from corridor.errors import ConfigError

log = logging.getLogger(__name__)


def _local():
    from corridor.backends.local import compute_local

    return compute_local


def _dask():
    from corridor.backends.dask_backend import compute_dask

    return compute_dask


#: Backend name -> loader returning ``compute(cfg, inputs, stages, work_dir=None) -> Run``.
BACKENDS = {"local": _local, "dask": _dask}


def backend_name(cfg: Config) -> str:
    """The configured backend name, checked against :data:`BACKENDS`.

    Raises
    ------
    ConfigError
        ``run.backend`` names no known backend.
    """
    name = str(cfg.run.backend)
    if name not in BACKENDS:
        raise ConfigError(f"{cfg.path.name}: run.backend: {name!r} is not one of"
                          f" {', '.join(BACKENDS)}")
    return name


def compute_function(cfg: Config, work_dir: Path | None = None):
    """The configured backend's compute, as ``fn(cfg, inputs, stages) -> Run``.

    Parameters
    ----------
    cfg : Config
    work_dir : Path, optional
        Folder for the backend's temporary files when ``run.work_dir`` is
        empty (the runner passes the output folder's parent).
    """
    name = backend_name(cfg)
    if name == "local":
        from corridor.backends.local import compute_local

        return compute_local
    fn = BACKENDS[name]()
    return functools.partial(fn, work_dir=work_dir)


def incremental_compute(cache_module, cfg: Config, inputs, stages, folder: Path, keys,
                        compute_fn):
    """:func:`corridor.cache.incremental_compute` with the changed assets computed by
    ``compute_fn``."""
    return cache_module.incremental_compute(cfg, inputs, stages, folder, keys,
                                            compute_fn=compute_fn)


def override_run(cfg: Config, **settings) -> Config:
    """A copy of ``cfg`` with some ``[run]`` settings replaced (benchmarks and tests).

    Raises
    ------
    ConfigError
        A name that is not a run setting.
    """
    unknown = [k for k in settings if k not in RUN_SETTINGS]
    if unknown:
        raise ConfigError([f"{cfg.path.name}: run.{k}: unknown setting" for k in unknown])
    run = cfg.run.replace(**settings)
    resolved = dict(cfg.resolved)
    resolved["run"] = {**dict(resolved.get("run", {})), **settings}
    return dataclasses.replace(cfg, run=run, resolved=MappingProxyType(resolved))
