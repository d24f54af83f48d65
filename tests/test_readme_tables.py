"""README.md's settings and field tables are the ones the specs generate.

The tables between ``<!-- BEGIN GENERATED: ... -->`` markers are rebuilt from
:mod:`corridor.settings` and :mod:`corridor.schema`; a change of a setting or
field that is not carried into the README fails here. Rewrite them with
``python -m corridor.settings_tables README.md``.
"""

from __future__ import annotations

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
