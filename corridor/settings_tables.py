"""The README's settings and field tables, generated from the specs.

Each table sits in README.md between ``<!-- BEGIN GENERATED: name -->`` and
``<!-- END GENERATED: name -->``; :func:`render_readme` replaces what lies
between with the table built from the specs, and
``tests/test_readme_tables.py`` fails when README.md differs from it.
Rewrite the README after changing a spec with::

    python -m corridor.settings_tables README.md
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

from corridor.config import LINE_DEFAULT_KEYS
from corridor.kinds import builtin_kinds
from corridor.schema import (
    COMMON_ASSET_FIELDS,
    FEATURE_ID_FIELDS,
    GROUND_FIELDS,
    LINE_FIELDS,
    SOIL_FIELDS,
    SUBSTATION_FIELDS,
    TOWER_FIELDS,
)
from corridor.settings import RUN_SETTINGS, Spec, _plain

_BLOCK = re.compile(r"(<!-- BEGIN GENERATED: (?P<name>[a-z_]+) -->\n)(?P<body>.*?)"
                    r"(<!-- END GENERATED: (?P=name) -->)", re.DOTALL)


def _value(value) -> str:
    return f"`{_plain(value)!r}`"


def _meaning(spec: Spec) -> str:
    text = spec.doc
    if spec.low is not None or spec.high is not None:
        text += f" Valid {spec.low:g}–{spec.high:g}."
    if spec.choices is not None:
        text += f" One of {', '.join(map(str, spec.choices))}."
    return text


def run_settings_table() -> str:
    """The ``[run]`` settings: name, type, unit, default, meaning and valid range."""
    rows = ["| setting | type | unit | default | meaning |", "|---|---|---|---|---|"]
    for spec in RUN_SETTINGS.values():
        rows.append(f"| `{spec.name}` | {spec.type_label} | {spec.unit} |"
                    f" {_value(spec.default)} | {_meaning(spec)} |")
    return "\n".join(rows) + "\n"


def power_line_fields_table() -> str:
    """The power-line fields; defaults from ``[line_defaults]``."""
    rows = ["| field | type | default | meaning |", "|---|---|---|---|"]
    for spec in LINE_FIELDS:
        if spec.name in LINE_DEFAULT_KEYS:
            default = f"{_value(LINE_DEFAULT_KEYS[spec.name])} from `[line_defaults]`"
        else:
            default = "required"
        rows.append(f"| `{spec.name}` | {spec.type_label} | {default} | {_meaning(spec)} |")
    return "\n".join(rows) + "\n"


def asset_fields_table() -> str:
    """The asset fields with each built-in kind's default (``–``: not a field of the kind)."""
    kinds = builtin_kinds()
    head = " | ".join(kinds)
    rows = [f"| field | type | {head} | meaning |", "|---|---|" + "---|" * len(kinds) + "---|"]
    specs: list[Spec] = list(COMMON_ASSET_FIELDS)
    for kind in kinds.values():
        specs.extend(s for s in kind.fields if s.name not in {x.name for x in specs})
    for spec in specs:
        cells = []
        for kind in kinds.values():
            if spec.name == "asset_id":
                cells.append("required")
            elif spec.name in kind.defaults:
                cells.append(_value(kind.defaults[spec.name]))
            else:
                cells.append("–")
        rows.append(f"| `{spec.name}` | {spec.type_label} | {' | '.join(cells)} |"
                    f" {_meaning(spec)} |")
    return "\n".join(rows) + "\n"


def _field_default(spec: Spec) -> str:
    """``required`` (no default), ``empty`` (unknown or blank) or the default value."""
    if spec.default is None:
        return "required"
    if spec.default == "" or (isinstance(spec.default, float) and spec.default != spec.default):
        return "empty"
    return _value(spec.default)


#: Optional fields whose missing value comes from another table of the config.
_FILLED_ELSEWHERE = {("substations", "clearing_time_s"): "`[line_defaults]`"}


def other_layer_fields_table() -> str:
    """The fields of the soil, grounds, towers and substations layers (:mod:`corridor.schema`)."""
    rows = ["| layer | field | type | default | meaning |", "|---|---|---|---|---|"]
    for layer, specs in (("soil", SOIL_FIELDS), ("grounds", GROUND_FIELDS),
                         ("towers", TOWER_FIELDS),
                         ("substations", SUBSTATION_FIELDS)):
        if layer in FEATURE_ID_FIELDS:
            specs = (FEATURE_ID_FIELDS[layer], *specs)
        for spec in specs:
            default = _FILLED_ELSEWHERE.get((layer, spec.name)) or _field_default(spec)
            rows.append(f"| {layer} | `{spec.name}` | {spec.type_label} |"
                        f" {default} | {_meaning(spec)} |")
    return "\n".join(rows) + "\n"


#: Generated tables by the name their README markers carry.
TABLES = {
    "run_settings": run_settings_table,
    "power_line_fields": power_line_fields_table,
    "asset_fields": asset_fields_table,
    "other_layer_fields": other_layer_fields_table,
}


def render_readme(text: str) -> str:
    """``text`` with every generated block replaced by its table.

    Raises
    ------
    KeyError
        A block names no known table.
    """
    return _BLOCK.sub(lambda m: m.group(1) + TABLES[m.group("name")]() + m.group(4), text)


def blocks(text: str) -> list[str]:
    """Names of the generated blocks in ``text``, in order."""
    return [m.group("name") for m in _BLOCK.finditer(text)]


def main(argv: list[str] | None = None) -> int:
    """Rewrite the generated tables of the README file given (default: README.md)."""
    args = sys.argv[1:] if argv is None else argv
    path = Path(args[0] if args else "README.md")
    text = path.read_text(encoding="utf-8")
    path.write_text(render_readme(text), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
