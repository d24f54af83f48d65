"""Where a run's outputs came from: its input datasets, their hashes, the fingerprint.

``run.json`` lists every input dataset (:func:`input_records`); two runs with
the same :func:`input_fingerprint` give the same outputs, which lets a rerun
with nothing changed copy the previous data files (:func:`inputs_unchanged`).
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

from corridor import __version__
from corridor.config import Config


def input_files(cfg: Config) -> list[Path]:
    """The input datasets of a run (config, arrangements, every layer path), once each.

    A path names a dataset, which may be several files (Shapefile sidecars,
    GeoPackage ``-wal``) or a folder: :mod:`corridor.io.fingerprint` hashes them all.
    """
    paths = [cfg.path, cfg.arrangements_path, cfg.power_lines.path]
    paths += [a.path for a in cfg.assets]
    paths += [s.path for s in (cfg.soil, cfg.grounds, cfg.towers) if s is not None]
    # the readings and the calibration file (docs/methods.md §17)
    paths += [Path(x["path"]) for x in (cfg.readings, cfg.calibration) if x]
    seen: list[Path] = []
    for p in paths:
        if p not in seen:
            seen.append(p)
    return seen


def input_records(cfg: Config) -> list[dict]:
    """Path, SHA-256 and modification time of every input dataset of a run.

    ``sha256`` is :func:`corridor.io.fingerprint.dataset_sha256` (for a
    single-file dataset, the SHA-256 of its bytes); ``modified_utc`` is the
    latest modification time of the dataset's files; ``files`` counts them.
    """
    from corridor.io.fingerprint import dataset_files, dataset_modified, dataset_sha256

    out = []
    for p in input_files(cfg):
        mtime = dataset_modified(p)
        out.append({"path": str(p), "sha256": dataset_sha256(p),
                    "modified_utc": (datetime.fromtimestamp(mtime, UTC)
                                     .isoformat(timespec="seconds") if mtime is not None
                                     else ""),
                    "files": len(dataset_files(p))})
    return out


def input_fingerprint(cfg: Config) -> str:
    """SHA-256 over everything a run's outputs depend on.

    Every input dataset (config, arrangements, layers: every file of each,
    :func:`corridor.io.fingerprint.dataset_sha256`) and limit-set file by
    path and content, corridor's version and source files, and the installed
    plugins. Equal fingerprints give equal outputs.
    """
    import hashlib

    from corridor.io.fingerprint import dataset_sha256
    from corridor.keys import code_fingerprint, limit_files
    from corridor.registry import registry

    h = hashlib.sha256()
    for p in [*input_files(cfg), *limit_files(cfg)]:
        h.update(str(p).encode("utf-8", "surrogateescape"))
        h.update(dataset_sha256(p).encode())
    h.update(__version__.encode())
    h.update(code_fingerprint().encode())
    h.update(registry.fingerprint().encode())
    return h.hexdigest()


def inputs_unchanged(run, previous_record: dict | None) -> bool:
    """True when every input file, every asset key and the config match the last run."""
    if not previous_record:
        return False
    if run.counts.get("assets_recomputed", 1) != 0:
        return False
    try:
        before = {(d["path"], d["sha256"]) for d in previous_record.get("inputs", [])}
    except (TypeError, KeyError):
        return False
    from corridor.io.fingerprint import dataset_sha256

    now = {(str(p), dataset_sha256(p)) for p in input_files(run.config)}
    state = run.record.get("inputs_state")
    return (before == now and state is not None
            and previous_record.get("inputs_state") == state
            and previous_record.get("versions", {}).get("corridor") == __version__)


