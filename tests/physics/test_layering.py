"""Layering: the physics core and the network solver depend on nothing above them.

corridor.physics imports only corridor.physics (pure numpy/scipy functions);
corridor.network imports only corridor.physics, corridor.network and
corridor.errors. In particular neither imports steps, pipeline, runner,
config or registry. Checked on the source with ast, imports inside
functions included.
"""

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[2] / "corridor"
ALLOWED = {
    "physics": ("corridor.physics",),
    "network": ("corridor.physics", "corridor.network", "corridor.errors"),
}


def _corridor_imports(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative import: resolve against the package
                base = ".".join(("corridor", path.parent.name))
                names = [f"{base}.{node.module}" if node.module else base]
            else:
                names = [node.module or ""]
        else:
            continue
        yield from (n for n in names if n == "corridor" or n.startswith("corridor."))


@pytest.mark.parametrize("package", sorted(ALLOWED))
def test_package_imports_only_lower_layers(package):
    files = sorted((PKG / package).glob("*.py"))
    assert files
    bad = []
    for path in files:
        for name in _corridor_imports(path):
            if not any(name == p or name.startswith(p + ".") for p in ALLOWED[package]):
                bad.append(f"{path.name}: {name}")
    assert not bad, f"corridor.{package} imports from above its layer: {bad}"
