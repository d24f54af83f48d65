"""Every public function of corridor.physics and corridor.network runs in production.

A function the tests check against a published reference is only worth that
check if a real run calls it. This test runs the demo through the command
line (``corridor run config/demo.toml``) in-process with a trace hook and
asserts that every public function, method and property defined in the
modules of :mod:`corridor.physics` and :mod:`corridor.network` was entered.
A public function nothing in production calls is to be deleted (or wired in).
"""

import importlib
import inspect
import pkgutil
import sys
import threading
from pathlib import Path

import corridor.network
import corridor.physics
from corridor.physics import earth_return

ROOT = Path(__file__).resolve().parents[2]


def _public_code_objects():
    """Map id(code object) -> dotted name of every public function of the two packages."""
    out = {}
    for pkg in (corridor.physics, corridor.network):
        for info in pkgutil.iter_modules(pkg.__path__):
            mod = importlib.import_module(f"{pkg.__name__}.{info.name}")
            for name, obj in vars(mod).items():
                if name.startswith("_") or getattr(obj, "__module__", None) != mod.__name__:
                    continue
                if inspect.isfunction(obj):
                    out[id(obj.__code__)] = (f"{mod.__name__}.{name}", obj.__code__)
                elif inspect.isclass(obj):
                    for attr, value in vars(obj).items():
                        if attr.startswith("_") and attr != "__init__":
                            continue
                        if isinstance(value, (staticmethod, classmethod)):
                            value = value.__func__
                        elif isinstance(value, property):
                            value = value.fget
                        if inspect.isfunction(value):
                            out[id(value.__code__)] = (f"{mod.__name__}.{name}.{attr}",
                                                       value.__code__)
    return out


def test_demo_run_calls_every_public_physics_and_network_function(cli, tmp_path):
    wanted = _public_code_objects()
    assert len(wanted) > 40  # the hook sees the packages (sanity)
    # a fresh process builds the Carson table on first use; earlier tests may have
    earth_return.carson_correction_table.cache_clear()
    entered: set[int] = set()

    def hook(frame, event, arg):  # global trace: called once per Python call, no line events
        entered.add(id(frame.f_code))

    old = sys.gettrace()
    threading.settrace(hook)
    sys.settrace(hook)
    try:
        rc = cli(["run", str(ROOT / "config" / "demo.toml"), "--out", str(tmp_path / "out"),
                  "-q"])
    finally:
        sys.settrace(old)
        threading.settrace(old)
    assert rc == 0
    missing = sorted(name for key, (name, _code) in wanted.items() if key not in entered)
    assert not missing, f"public functions no production run calls: {missing}"
