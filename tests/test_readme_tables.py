"""README.md's settings and field tables are the ones the specs generate.

The tables between ``<!-- BEGIN GENERATED: ... -->`` markers are rebuilt from
:mod:`corridor.settings` and :mod:`corridor.schema`; a change of a setting or
field that is not carried into the README fails here. Rewrite them with
``python -m corridor.settings_tables README.md``.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

from corridor.settings import RUN_SETTINGS
from corridor.settings_tables import TABLES, blocks, render_readme

README = Path(__file__).resolve().parents[1] / "README.md"


def test_readme_has_every_generated_table_once():
    assert sorted(blocks(README.read_text(encoding="utf-8"))) == sorted(TABLES)


def test_readme_tables_match_the_specs():
    text = README.read_text(encoding="utf-8")
    fresh = render_readme(text)
    if fresh != text:
        diff = [f"- {a}\n+ {b}" for a, b in zip(text.splitlines(), fresh.splitlines(),
                                                  strict=False) if a != b][:5]
        raise AssertionError("README.md tables differ from the specs; run"
                             " `python -m corridor.settings_tables README.md`:\n"
                             + "\n".join(diff))


def test_run_settings_table_lists_every_setting_with_its_default():
    table = TABLES["run_settings"]()
    rows = [r for r in table.splitlines()[2:]]
    assert [r.split("|")[1].strip().strip("`") for r in rows] == list(RUN_SETTINGS)
    # the default column reads back as the default when parsed as TOML (the config's
    # own syntax; Python's repr of these values is valid TOML for numbers and strings)
    row = next(r for r in rows if r.startswith("| `segment_length_m`"))
    cell = row.split("|")[4].strip().strip("`")
    assert tomllib.loads(f"x = {cell}")["x"] == 50.0
    assert "Valid 1–1000." in row


def test_other_layer_fields_are_the_ones_the_config_accepts(tmp_path):
    """The soil, grounds and towers rows name exactly the fields a config may map.

    The table is generated from corridor.schema; load_config checks field mappings
    against its own lists, so a field the README lists must load and one it does
    not list must be refused (exit-2 ConfigError)."""
    import pytest

    from corridor.config import load_config
    from corridor.errors import ConfigError
    from corridor.schema import (
        FEATURE_ID_FIELDS,
        GROUND_FIELDS,
        SOIL_FIELDS,
        SUBSTATION_FIELDS,
        TOWER_FIELDS,
    )

    table = TABLES["other_layer_fields"]()
    listed: dict[str, list[str]] = {}
    for row in table.splitlines()[2:]:
        layer, field = (c.strip().strip("`") for c in row.split("|")[1:3])
        listed.setdefault(layer, []).append(field)
    assert listed == {
        "soil": [s.name for s in SOIL_FIELDS],
        "grounds": [FEATURE_ID_FIELDS["grounds"].name, *(s.name for s in GROUND_FIELDS)],
        "towers": [FEATURE_ID_FIELDS["towers"].name, *(s.name for s in TOWER_FIELDS)],
        "substations": [FEATURE_ID_FIELDS["substations"].name,
                        *(s.name for s in SUBSTATION_FIELDS)],
    }
    demo = (README.parent / "config" / "demo.toml").read_text(encoding="utf-8")
    demo = demo.replace('"../sample_layers/', f'"{README.parent.as_posix()}/sample_layers/')
    demo = demo.replace('output_dir = "../out/demo"', f'output_dir = "{tmp_path.as_posix()}/o"')

    gpkg = README.parent / "sample_layers" / "brackenford_vale.gpkg"
    # the demo config without its soil and grounds tables; each case adds one layer
    base = re.sub(r"\n\[layers\.(soil|grounds)\]\n(?:[^\[].*\n)*", "\n", demo)

    def config_with(role: str, fields: list[str]) -> Path:
        mapping = ", ".join(f'{f} = "F{i}"' for i, f in enumerate(fields))
        path = tmp_path / f"{role}.toml"
        path.write_text(f'{base}\n[layers.{role}]\npath = "{gpkg.as_posix()}"\n'
                        f'layer = "{role}"\nfields = {{ {mapping} }}\n', encoding="utf-8")
        return path

    for role, fields in listed.items():
        load_config(config_with(role, fields))
        with pytest.raises(ConfigError):
            load_config(config_with(role, [*fields, "not_a_field"]))
