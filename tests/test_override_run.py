"""``backends.override_run``: the config copy that benchmarks, tests and the backends use.

The dask backend sends the config to its workers, and dask.distributed moves
task arguments between processes by pickling them (dask.distributed
documentation, "Serialization"), so a copy must pickle like the loaded config.
``types.MappingProxyType`` cannot be pickled (Python documentation, ``pickle``:
only objects whose type supports the reduce protocol pickle; ``mappingproxy``
does not), which the copy once carried in ``resolved``.
"""

from __future__ import annotations

import pickle
from pathlib import Path

import pytest

from corridor.backends import override_run
from corridor.config import load_config
from corridor.errors import ConfigError

DEMO = Path(__file__).resolve().parents[1] / "config" / "demo.toml"


def test_copy_pickles_and_records_the_new_settings():
    cfg = load_config(DEMO)
    copy = override_run(cfg, threads=1, partitions=3)
    back = pickle.loads(pickle.dumps(copy))
    assert back.run.threads == 1 and back.run.partitions == 3
    # run.json reports the settings in force, so ``resolved`` follows the copy
    assert back.resolved["run"]["threads"] == 1
    assert back.resolved["run"]["partitions"] == 3
    # everything else is the loaded config's, and the loaded config is left as it was
    assert back.resolved["layers"] == cfg.resolved["layers"]
    assert cfg.resolved["run"]["threads"] == cfg.run.threads


def test_unknown_setting_is_a_config_error():
    cfg = load_config(DEMO)
    with pytest.raises(ConfigError, match="run.no_such_setting: unknown setting"):
        override_run(cfg, no_such_setting=1)


def test_bad_value_is_a_config_error_naming_the_file():
    cfg = load_config(DEMO)
    with pytest.raises(ConfigError, match=r"demo\.toml: run\.threads"):
        override_run(cfg, threads="many")
