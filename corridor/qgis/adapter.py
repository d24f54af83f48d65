"""Algorithm declarations for the QGIS provider, generated from the step catalog.

:func:`catalog_steps` is the ONE place that reads the catalog's shape; a change
of :mod:`corridor.steps.catalog` needs an edit there only. Everything after it
(:func:`algorithm_specs`, the plugin) works on the plain step dicts it returns::

    {"name", "title", "description",
     "inputs":     [{"name", "type", "description", "optional"}],   # *_layer types
     "outputs":    [{"name", "type", "description", "optional"}],
     "parameters": [{"name", "type", "unit", "default", "description", "low", "high",
                     "choices"}]}
"""

from __future__ import annotations

import json
import sys

#: Algorithm id of the whole run.
SCREEN_ID = "screen"
#: Output layers of the whole run (layers of screening.gpkg), loaded into the project.
SCREEN_LAYERS = ("hazards", "assets", "sites", "exposures", "segments", "power_lines")

_GEOMETRY = {"line_layer": "line", "polygon_layer": "polygon", "point_layer": "point"}
_KIND = {"float": "number", "int": "integer", "bool": "bool", "str": "string", "path": "string",
         "float_list": "list", "str_list": "list"}


def catalog_steps() -> list[dict]:
    """The steps of :mod:`corridor.steps.catalog` as plain dicts (the one adapter)."""
    from corridor.steps import catalog

    return catalog.describe()


def _label(p: dict) -> str:
    """``Screening distance [m] (1 – 5000)``: name, unit and bounds for the dialog."""
    text = p["name"].replace("_", " ")
    text = text[:1].upper() + text[1:]
    if p.get("unit") not in (None, "", "-", "path"):
        text += f" [{p['unit']}]"
    if p.get("low") is not None and p.get("high") is not None:
        text += f" ({p['low']:g} – {p['high']:g})"
    return text


def _choices(name: str) -> list[str] | None:
    """Values a parameter takes from a list: the limit sets known to the registry."""
    if name != "limit_set":
        return None
    from corridor.errors import ConfigError
    from corridor.registry import load_plugins

    try:
        return list(load_plugins().limit_set_names())
    except ConfigError:  # a broken plugin: the run will say so; a free text field here
        return None


def _parameter(p: dict) -> dict:
    kind = _KIND.get(p["type"], "string")
    default = p.get("default")
    if kind == "list" and isinstance(default, list):
        default = ", ".join(str(v) for v in default)
    choices = p.get("choices") or _choices(p["name"])
    if choices:
        kind = "multichoice" if p["type"] == "str_list" else "choice"
    return {"name": p["name"], "kind": kind, "type": p["type"],
            "label": _label(p), "default": default, "choices": choices,
            "min": p.get("low"), "max": p.get("high"), "help": p.get("description", "")}


def _input(p: dict) -> dict | None:
    geometry = _GEOMETRY.get(p["type"])
    if geometry is None:
        return None
    return {"name": p["name"], "geometry": geometry, "multiple": p["name"] == "assets",
            "optional": True, "saved": p["name"] == "segments",
            "label": p["description"], "help": p["description"]}


def _outputs(step: dict) -> list[dict]:
    if step["name"] == "report":
        return ([{"name": n, "kind": "layer", "file": "screening.gpkg", "layer": n}
                 for n in SCREEN_LAYERS]
                + [{"name": "report", "kind": "html", "file": "report.html"}])
    out = []
    for p in step["outputs"]:
        if p["type"] in _GEOMETRY:
            out.append({"name": p["name"], "kind": "layer", "file": f"{step['name']}.gpkg",
                        "layer": p["name"], "optional": p.get("optional", False)})
        elif p["type"] == "table":
            out.append({"name": p["name"], "kind": "file", "file": f"{p['name']}.csv"})
    return out


def algorithm_specs(steps: list[dict] | None = None) -> list[dict]:
    """One algorithm per step, plus "Screen corridor" (the whole run, ``corridor run``).

    Parameters
    ----------
    steps : list of dict, optional
        Plain step dicts (default: :func:`catalog_steps`).

    Returns
    -------
    list of dict
        ``{"id", "name", "group", "help", "mode" ("run" or "step"), "step",
        "inputs", "parameters", "outputs"}`` per algorithm, JSON-ready.
    """
    steps = catalog_steps() if steps is None else steps
    algs = []
    for step in steps:
        base = {"inputs": [i for i in map(_input, step["inputs"]) if i is not None],
                "parameters": [_parameter(p) for p in step["parameters"]],
                "outputs": _outputs(step)}
        algs.append({"id": step["name"], "name": f"{step['title']} ({step['name']})",
                     "group": "Steps", "help": step["description"], "mode": "step",
                     "step": step["name"], **base})
        if step["name"] == "report":
            algs.insert(0, {"id": SCREEN_ID, "name": "Screen corridor", "group": "Screening",
                            "help": "The whole screening run, as `corridor run` does: "
                                    + step["description"], "mode": "run", "step": "report",
                            **base})
    return algs


def main() -> int:
    """Print :func:`algorithm_specs` as JSON (``python -m corridor.qgis.adapter``)."""
    json.dump(algorithm_specs(), sys.stdout, indent=1)
    sys.stdout.write("\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
