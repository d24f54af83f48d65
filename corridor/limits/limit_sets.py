"""Limit sets: loading, validation and evaluation of the criteria.

A limit set is a TOML file in ``corridor/data/limits/`` (schema in the header of each
shipped file and in :data:`METHODS`). :func:`load_limit_set` reads one into an
immutable, validated :class:`LimitSet`; :func:`corridor.limits.evaluate.evaluate`
judges per-segment quantities against every criterion of the set at once,
vectorised over segments.

Schema
------
``[meta]``
    ``name`` (str), ``description`` (str), ``editions`` (list of str: the
    editions of the standards the set follows).
``[settings]`` (optional)
    ``review_threshold`` (float, 0 < x < 1, default 0.5): utilization from
    which a segment is classed ``"review"`` rather than ``"clear"``.
``[criteria.<name>]``, one table per criterion
    ``applies_to`` (list of asset kinds: the built-in pipeline, fence, rail,
    telecom, or the kinds the caller names, plugins' included),
    ``case`` (``"normal"``, ``"fault"``, ``"capacitive"`` or
    ``"conductive"``), ``quantity`` (name of the per-segment quantity judged,
    e.g. ``v_normal_v``), ``method`` (a key of :data:`METHODS`), optional
    ``description`` and ``source`` (str), optional ``needs`` (list of
    lower-case names: the inputs the quantity needs that a run may lack), and
    the method's parameters. A criterion whose ``quantity`` is not one of
    :data:`COMPUTED_QUANTITIES` is an error unless it has ``needs``; such a
    criterion, and any whose quantity is empty on every segment it applies to,
    is reported as *not assessed* (never as passing) by the run.
"""

from __future__ import annotations

import logging
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from corridor.errors import ConfigError
from corridor.limits.methods import (
    CASES,
    METHODS,
    Context,
    MethodSpec,
    _bool,
    _choice,
    _fraction,
    _identifier,
    _names,
    _p,
    _string,
    _string_list,
    asset_kinds_check,
)
from corridor.settings import Spec

__all__ = ["BUILTIN_ASSET_KINDS", "CASES", "COMPUTED_QUANTITIES", "Context", "Criterion",
           "DEFAULT_REVIEW_THRESHOLD", "DEFAULT_SEARCH_DIR", "HAZARD_CLASSES", "LimitSet",
           "NOT_ASSESSED",
           "QUANTITY_TITLES",
           "LimitSetError", "METHODS", "MethodSpec", "available_limit_sets", "load_limit_set"]

logger = logging.getLogger(__name__)

#: Asset kinds a criterion may apply to when the caller names none (the
#: built-in kinds; a run passes the registered kinds, plugins' included).
BUILTIN_ASSET_KINDS = ("pipeline", "fence", "rail", "telecom")
#: Hazard classes: by utilization from least to most severe, then the class of a
#: segment that no criterion of the limit set judged (never read as clear).
NOT_ASSESSED = "not assessed"
HAZARD_CLASSES = ("clear", "review", "exceeds", NOT_ASSESSED)
#: Default review threshold (common practice: look again at anything above
#: half its limit, since screening inputs are uncertain).
DEFAULT_REVIEW_THRESHOLD = 0.5

#: Per-segment quantities the screening computes (the assess stage hands these
#: to :func:`evaluate`; see :mod:`corridor.steps.assess` for what each one is).
COMPUTED_QUANTITIES = (
    "v_normal_v", "v_fault_v", "v_touch_fault_v", "v_coating_stress_v", "ac_density_a_per_m2",
    "i_normal_body_ma", "i_capacitive_body_ma", "i_capacitive_short_ma",
    "v_capacitive_open_v", "emf_section_normal_v", "emf_section_fault_v", "emf_normal_v",
    "emf_fault_v", "v_step_fault_v", "iso18086_density_ratio",
    "iso18086_density_ratio_with_dc",
)

#: Plain titles of the computed quantities, for reports (units follow the names).
QUANTITY_TITLES = {
    "v_normal_v": "Voltage to remote earth, normal load",
    "v_fault_v": "Voltage to remote earth, earth fault",
    "v_touch_fault_v": "Touch voltage, earth fault",
    "v_coating_stress_v": "Voltage across the coating, earth fault",
    "ac_density_a_per_m2": "AC current density at a 1 cm² holiday",
    "i_normal_body_ma": "Current through a person, normal load",
    "i_capacitive_body_ma": "Current through a person, capacitive coupling",
    "i_capacitive_short_ma": "Short-circuit current, capacitive coupling",
    "v_capacitive_open_v": "Open-circuit voltage, capacitive coupling",
    "emf_section_normal_v": "Longitudinal EMF between grounded ends, normal load",
    "emf_section_fault_v": "Longitudinal EMF between grounded ends, earth fault",
    "emf_normal_v": "Longitudinal EMF, normal load",
    "emf_fault_v": "Longitudinal EMF, earth fault",
    "v_step_fault_v": "Step voltage beside a faulted tower, earth fault",
    "iso18086_density_ratio": "ISO 18086 current-density ratio",
    "iso18086_density_ratio_with_dc": "ISO 18086 current-density ratio with the DC density",
}

#: Directory of the shipped limit sets: package data (``corridor/data/limits``),
#: so that an installed wheel carries them.
DEFAULT_SEARCH_DIR = Path(__file__).resolve().parents[1] / "data" / "limits"

_NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")
#: ``{name}`` in a criterion's title.
_PLACEHOLDER = re.compile(r"\{([a-z_][a-z0-9_]*)\}")


def _fill(values: Mapping[str, Any], key: str) -> str:
    v = values.get(key)
    if v is None:
        return "{" + key + "}"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int | float):
        return f"{float(v):g}"
    return str(v)


class LimitSetError(ConfigError):
    """A limit-set file or its overrides are invalid.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the file and the key.
    """


def _common_keys(asset_kinds: tuple[str, ...]) -> dict[str, Spec]:
    """The keys every criterion has (``applies_to`` drawn from ``asset_kinds``)."""
    return {
        "applies_to": _p(asset_kinds_check(asset_kinds), dtype="str_list",
                         doc="Asset kinds judged."),
        "case": _p(_choice(CASES), dtype="str", doc="Coupling case."),
        "quantity": _p(_identifier, dtype="str", doc="Per-segment quantity judged."),
        "method": _p(_choice(tuple(METHODS)), dtype="str", doc="Criterion method."),
        "description": _p(_string, "", dtype="str"),
        "source": _p(_string, "", dtype="str"),
        "needs": _p(_names, (), dtype="str_list"),
        "title": _p(_string, "", dtype="str", doc="Plain-language name for reports."),
        "formula": _p(_string, "", dtype="str", doc="The check as a formula, plain text."),
        "edition": _p(_string, "", dtype="str", doc="Edition of the source followed."),
        "to_verify": _p(_bool, False, dtype="bool",
                        doc="true: the value is recalled, not read from the standard's text."),
    }


# --------------------------------------------------------------------------
# The validated objects
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class Criterion:
    """One validated criterion of a limit set.

    Parameters
    ----------
    name : str
        Key of the criterion in the file, e.g. ``"touch_fault"``.
    applies_to : tuple of str
        Asset kinds judged.
    case : str
        Coupling case, one of :data:`CASES`.
    quantity : str
        Name of the per-segment quantity judged.
    method : str
        Key of :data:`METHODS`.
    parameters : tuple of (str, object)
        The method's parameters, defaults filled in, sorted by name.
    description, source : str
        Free text from the file.
    needs : tuple of str
        Inputs the quantity needs that a run may not have (``needs`` in the
        file); empty when the screening always computes the quantity.
    title : str
        Plain-language name for reports, e.g. ``"Touch voltage during earth
        fault (IEEE Std 80, {body_weight_kg} kg, {clearing_time})"``; ``{p}``
        is replaced by parameter ``p``, ``{clearing_time}`` by the clearing
        time (see :meth:`plain_name`).
    formula : str
        The check as a plain-text formula.
    edition : str
        Edition of the source the value follows, e.g. ``"IEEE Std 80-2013"``.
    to_verify : bool
        True where the value was recalled rather than read from the
        standard's text: a report lists it as a value to be verified.
    """

    name: str
    applies_to: tuple[str, ...]
    case: str
    quantity: str
    method: str
    parameters: tuple[tuple[str, Any], ...]
    description: str = ""
    source: str = ""
    needs: tuple[str, ...] = ()
    title: str = ""
    formula: str = ""
    edition: str = ""
    to_verify: bool = False

    def plain_name(self, clearing_time_s: float | None = None) -> str:
        """The criterion's plain-language name, parameters filled in.

        Parameters
        ----------
        clearing_time_s : float, optional
            Fault clearing time the value was read at [s]; without it
            ``{clearing_time}`` reads "at the clearing time".

        Returns
        -------
        str
            ``title`` with ``{parameter}`` and ``{clearing_time}`` filled in;
            the description, else the name, where the file gives no title.
        """
        text = self.title or self.description or self.name.replace("_", " ")
        if clearing_time_s is not None and np.isfinite(clearing_time_s):
            t_text = f"{float(clearing_time_s):g} s"
        else:
            t_text = "at the clearing time"
        values = {**self.params, "clearing_time": t_text}
        return _PLACEHOLDER.sub(lambda m: _fill(values, m.group(1)), text)

    @property
    def uses_clearing_time(self) -> bool:
        """True where the permitted value depends on the fault clearing time."""
        return METHODS[self.method].uses_clearing_time

    def limit_text(self, unit: str = "") -> str:
        """The permitted value in words (value, table or formula with constants).

        Parameters
        ----------
        unit : str, optional
            Unit of the judged quantity, e.g. ``"V"``.

        Returns
        -------
        str
        """
        return METHODS[self.method].limit_text(self.params, unit)

    @property
    def computed(self) -> bool:
        """True when the screening computes this criterion's quantity."""
        return self.quantity in COMPUTED_QUANTITIES

    @property
    def params(self) -> dict[str, Any]:
        """The parameters as a fresh dict."""
        return dict(self.parameters)

    @property
    def label(self) -> str:
        """``"<name>:<case>"``, as reported in ``governing``."""
        return f"{self.name}:{self.case}"

    def permitted(self, ctx: Context) -> np.ndarray:
        """Permitted value of the quantity per segment, shape (ctx.n,)."""
        return np.asarray(METHODS[self.method].permitted(self.params, ctx), dtype=float)


@dataclass(frozen=True)
class LimitSet:
    """A validated, immutable limit set.

    Parameters
    ----------
    name : str
        ``meta.name``.
    description : str
        ``meta.description``.
    editions : tuple of str
        ``meta.editions``.
    review_threshold : float
        Utilization from which a segment is classed ``"review"`` [-].
    criteria : tuple of Criterion
        In file order.
    source_path : str
        The file it was read from.
    """

    name: str
    description: str
    editions: tuple[str, ...]
    review_threshold: float
    criteria: tuple[Criterion, ...]
    source_path: str = ""

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the criteria, in file order."""
        return tuple(c.name for c in self.criteria)

    def __getitem__(self, name: str) -> Criterion:
        for c in self.criteria:
            if c.name == name:
                return c
        raise KeyError(name)


# --------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------


def available_limit_sets(search_dir: str | Path | None = None) -> tuple[str, ...]:
    """Names of the limit sets in ``search_dir`` (default: the shipped ones)."""
    d = Path(search_dir) if search_dir is not None else DEFAULT_SEARCH_DIR
    return tuple(sorted(p.stem for p in d.glob("*.toml")))


def load_limit_set(name_or_path: str | Path, overrides: Mapping | None = None, *,
                   search_dir: str | Path | None = None,
                   asset_kinds: tuple[str, ...] | None = None) -> LimitSet:
    """Read, merge and validate a limit set.

    Parameters
    ----------
    name_or_path : str or Path
        A set name (``"iec_en"``), resolved to ``<search_dir>/<name>.toml``,
        or a path to a TOML file (anything with a ``.toml`` suffix or a
        directory separator).
    overrides : mapping, optional
        Nested dict deep-merged over the file before validation, e.g.
        ``{"criteria": {"touch_fault": {"body_weight_kg": 70}}}``. Tables
        merge key by key; any other value replaces the file's.
    search_dir : str or Path, optional
        Directory holding named sets. Default: the shipped sets in
        ``corridor/data/limits``.
    asset_kinds : tuple of str, optional
        The kinds ``applies_to`` may name; default :data:`BUILTIN_ASSET_KINDS`.
        A run passes the registered kinds (plugins' included).

    Returns
    -------
    LimitSet

    Raises
    ------
    LimitSetError
        Missing or unreadable file, TOML syntax error, unknown keys, wrong
        types or values; every problem is reported at once, each naming the
        file (or its overrides) and the key.
    """
    path = _resolve(name_or_path, search_dir)
    try:
        with path.open("rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise LimitSetError([f"{path}: limit-set file not found"]) from None
    except OSError as exc:
        raise LimitSetError([f"{path}: cannot read limit-set file: {exc}"]) from None
    except tomllib.TOMLDecodeError as exc:
        raise LimitSetError([f"{path}: invalid TOML: {exc}"]) from None

    override_paths: set[tuple[str, ...]] = set()
    if overrides is not None:
        if not isinstance(overrides, Mapping):
            raise LimitSetError([f"overrides to {path}: expected a mapping, got "
                                 f"{type(overrides).__name__}"])
        raw = _deep_merge(raw, overrides, (), override_paths)
    return _validate(raw, path, override_paths,
                     tuple(asset_kinds) if asset_kinds is not None else BUILTIN_ASSET_KINDS)


def _resolve(name_or_path, search_dir):
    s = str(name_or_path)
    if isinstance(name_or_path, Path) or s.endswith(".toml") or "/" in s or "\\" in s:
        return Path(name_or_path)
    d = Path(search_dir) if search_dir is not None else DEFAULT_SEARCH_DIR
    path = d / f"{s}.toml"
    if not path.is_file():
        names = ", ".join(available_limit_sets(d)) or "none"
        raise LimitSetError([f"{path}: no limit set named {s!r} (available: {names})"])
    return path


def _deep_merge(base, over, prefix, paths):
    out = dict(base)
    for k, v in over.items():
        key = (*prefix, str(k))
        if isinstance(v, Mapping) and isinstance(out.get(k), dict):
            out[k] = _deep_merge(out[k], v, key, paths)
        else:
            out[k] = _plain(v)
            paths.add(key)
    return out


def _plain(v):
    if isinstance(v, Mapping):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, tuple | list):
        return [_plain(x) for x in v]
    if isinstance(v, np.generic):
        return v.item()
    return v


def _validate(raw, path, override_paths, asset_kinds):
    problems: list[str] = []
    common_keys = _common_keys(asset_kinds)

    def where(*key):
        origin = str(path)
        if any(key[:i] in override_paths for i in range(1, len(key) + 1)):
            origin = f"overrides to {path}"
        return f"{origin}: {'.'.join(key)}"

    def check_table(obj, key, specs, allowed_extra=()):
        """Validate one table; returns dict of converted values."""
        out = {}
        if not isinstance(obj, dict):
            problems.append(f"{where(*key)}: expected a table, got {obj!r}")
            return None
        for k in obj:
            if k not in specs and k not in allowed_extra:
                known = ", ".join(sorted([*specs, *allowed_extra]))
                problems.append(f"{where(*key, k)}: unknown key (known keys: {known})")
        for k, spec in specs.items():
            if k not in obj:
                if spec.default is None:
                    problems.append(f"{where(*key, k)}: missing required key")
                else:
                    out[k] = spec.default
                continue
            value, problem = spec.validate(obj[k])
            if problem:
                problems.append(f"{where(*key, k)}: {problem}")
            else:
                out[k] = value
        return out

    for k in raw:
        if k not in ("meta", "settings", "criteria"):
            problems.append(f"{where(k)}: unknown key (known keys: criteria, meta, settings)")

    meta_specs = {"name": _p(_string, dtype="str"), "description": _p(_string, dtype="str"),
                  "editions": _p(_string_list, dtype="str_list")}
    meta = None
    if "meta" in raw:
        meta = check_table(raw["meta"], ("meta",), meta_specs)
    else:
        problems.append(f"{where('meta')}: missing required table")

    settings_specs = {"review_threshold": _p(_fraction, DEFAULT_REVIEW_THRESHOLD)}
    settings = check_table(raw.get("settings", {}), ("settings",), settings_specs)

    criteria: list[Criterion] = []
    raw_criteria = raw.get("criteria")
    if raw_criteria is None:
        problems.append(f"{where('criteria')}: missing required table")
    elif not isinstance(raw_criteria, dict) or not raw_criteria:
        problems.append(f"{where('criteria')}: expected a non-empty table of criteria")
    else:
        for cname, ctable in raw_criteria.items():
            key = ("criteria", cname)
            if not _NAME_RE.match(cname):
                problems.append(f"{where(*key)}: criterion names must be lower-case "
                                "identifiers")
            if not isinstance(ctable, dict):
                problems.append(f"{where(*key)}: expected a table, got {ctable!r}")
                continue
            method = ctable.get("method")
            mspec = METHODS.get(method) if isinstance(method, str) else None
            pspecs = mspec.params if mspec is not None else {}
            # Without a valid method the parameters cannot be checked; the
            # method problem itself is reported by the common-key check.
            extra = () if mspec is not None else tuple(ctable)
            common = check_table(ctable, key, common_keys, allowed_extra=tuple(pspecs) + extra)
            params = check_table(ctable, key, pspecs,
                                 allowed_extra=tuple(common_keys) + extra) if mspec else None
            if params is not None and method == "table_vs_time":
                d, v = params.get("table_duration_s"), params.get("table_value")
                if d is not None and v is not None and len(d) != len(v):
                    problems.append(f"{where(*key, 'table_value')}: has {len(v)} values for "
                                    f"{len(d)} durations")
            if common is None or params is None or len(common) < len(common_keys):
                continue
            if common["quantity"] not in COMPUTED_QUANTITIES and not common["needs"]:
                problems.append(
                    f"{where(*key, 'quantity')}: no stage computes {common['quantity']!r}, so"
                    " this criterion would pass without being judged; judge a computed"
                    f" quantity ({', '.join(COMPUTED_QUANTITIES)}) or declare the input it"
                    " needs, e.g. needs = [\"dc_current_density_a_per_m2\"] (the run then"
                    " reports it as not assessed)")
                continue
            unknown = [m for m in _PLACEHOLDER.findall(common["title"])
                       if m != "clearing_time" and m not in params]
            if unknown:
                problems.append(
                    f"{where(*key, 'title')}: {{{unknown[0]}}} is neither a parameter of"
                    f" method {method!r} ({', '.join(sorted(params)) or 'none'}) nor"
                    " {clearing_time}")
                continue
            criteria.append(Criterion(
                name=cname, applies_to=common["applies_to"], case=common["case"],
                quantity=common["quantity"], method=common["method"],
                parameters=tuple(sorted(params.items())),
                description=common["description"], source=common["source"],
                needs=common["needs"], title=common["title"], formula=common["formula"],
                edition=common["edition"], to_verify=common["to_verify"]))

    # Unknown keys were reported twice (once per spec pass) when both passes saw
    # them; keep each message once, in order.
    problems = list(dict.fromkeys(problems))
    if problems:
        raise LimitSetError(problems)
    assert meta is not None  # a missing [meta] table is a problem above
    logger.debug("loaded limit set %s from %s (%d criteria)", meta["name"], path,
                 len(criteria))
    return LimitSet(name=meta["name"], description=meta["description"],
                    editions=meta["editions"], review_threshold=settings["review_threshold"],
                    criteria=tuple(criteria), source_path=str(path))
