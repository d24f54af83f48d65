"""Feature ids and attribute values: checked against their field specs, feature by feature.

A present but invalid value rejects the feature (with the user's field name and
the reason); a missing one takes a default where the spec or the config gives one.
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd

from corridor.config import LayerSource
from corridor.errors import InputError
from corridor.settings import Spec

log = logging.getLogger(__name__)


def id_column(gdf: gpd.GeoDataFrame, src: LayerSource, canonical: str) -> str | None:
    user = src.fields.get(canonical, canonical)
    return user if user in gdf.columns else None


def id_text(values: pd.Series) -> pd.Series:
    """Ids as stripped text (``pd.NA`` where missing).

    Ids are strings everywhere: an integer id column gives ``"7"``, and so
    does a float column holding whole numbers (how an integer column with
    NULLs comes out of the reader), so that a ground item's ``asset_id`` 7
    matches the asset 7 whatever the two layers' column types.
    """
    if values.dtype.kind == "f":
        arr = values.to_numpy(dtype=float, na_value=np.nan)
        finite = np.isfinite(arr)
        whole = finite & (np.abs(arr) < 2.0**53)
        whole[whole] = arr[whole] == np.round(arr[whole])
        if finite.any() and (whole == finite).all():
            text = [str(int(v)) if f else pd.NA for v, f in zip(arr, finite, strict=True)]
            return pd.Series(text, index=values.index, dtype="string")
    out = values.astype("string").str.strip()
    return out.mask(out == "", pd.NA)


def feature_labels(index: pd.Index) -> np.ndarray:
    """Labels of features by their place in the layer: ``fid:<FID>`` or ``row:<n>``.

    A layer read by :func:`read_raw` carries GDAL's feature id (FID) as its
    index (named ``fid``): 1 first in a GeoPackage, 0 first in a Shapefile.
    A frame without it (an OpenStreetMap extract's joined lines) is labelled by
    its row number (0 first).
    """
    kind = "fid" if index.name == "fid" else "row"
    rows = (index.to_numpy() if pd.api.types.is_integer_dtype(index)
            else np.arange(len(index)))
    return np.array([f"{kind}:{int(i)}" for i in rows], dtype=object)


def feature_ids(gdf: gpd.GeoDataFrame, id_col: str | None) -> pd.Series:
    """Feature ids as text; a feature without one is named by its FID (:func:`feature_labels`),
    e.g. ``fid:12``, also when ``gdf`` holds only some rows of the layer (one asset kind)."""
    labels = feature_labels(gdf.index)
    if id_col is None:
        return pd.Series(labels, index=gdf.index, dtype="string")
    out = id_text(gdf[id_col])
    missing = out.isna().to_numpy()
    out = out.astype(object)
    out[missing] = labels[missing]
    return out.astype("string")


def blank(series: pd.Series) -> np.ndarray:
    """True where a raw value is missing: NULL, or text that is empty or only blanks."""
    missing = series.isna().to_numpy(dtype=bool).copy()
    if series.dtype.kind not in "biufcmM":
        text = series.astype("string").str.strip()
        missing |= (text == "").fillna(True).to_numpy(dtype=bool)
    return missing


def coerce(series: pd.Series, spec: Spec
            ) -> tuple[pd.Series, np.ndarray, np.ndarray, list[str]]:
    """Coerce a column to its spec.

    Returns
    -------
    values : Series
        Coerced values (garbage where bad).
    bad : ndarray of bool
        Missing or invalid.
    missing : ndarray of bool
        Missing (NULL or blank text); a subset of ``bad``. Only these may
        be filled from defaults.
    reasons : list of str
        Why each bad value is bad.
    """
    n = len(series)
    reasons = [""] * n
    missing = blank(series)
    for i in np.flatnonzero(missing):
        reasons[i] = "missing"
    if spec.dtype in ("float", "int"):
        if series.dtype.kind == "b":
            values = pd.Series(np.full(n, np.nan), index=series.index)
        else:
            values = pd.to_numeric(series.astype(object) if series.dtype.kind not in "iuf"
                                   else series, errors="coerce").astype("float64")
        arr = values.to_numpy(dtype=float, na_value=np.nan)
        bad = ~np.isfinite(arr) | missing
        for i in np.flatnonzero(bad & ~missing):
            raw = series.iloc[i]
            reasons[i] = (f"not a finite number: {raw!r}" if isinstance(raw, int | float)
                          else f"not a number: {raw!r}")
        ok = ~bad
        if spec.dtype == "int":
            frac = ok & (arr != np.round(np.where(ok, arr, 0.0)))
            for i in np.flatnonzero(frac):
                reasons[i] = f"{arr[i]} is not a whole number"
            bad |= frac
        if spec.low is not None:
            low = ~bad & (arr < spec.low)
            for i in np.flatnonzero(low):
                reasons[i] = f"{arr[i]} below the valid range [{spec.low}, {spec.high}]"
            bad |= low
        if spec.high is not None:
            high = ~bad & (arr > spec.high)
            for i in np.flatnonzero(high):
                reasons[i] = f"{arr[i]} above the valid range [{spec.low}, {spec.high}]"
            bad |= high
        return values, bad, missing, reasons
    if spec.dtype == "bool":
        text = series.astype("string").str.strip().str.lower()
        truth = {"true": True, "1": True, "yes": True, "y": True, "t": True,
                 "false": False, "0": False, "no": False, "n": False, "f": False,
                 "1.0": True, "0.0": False}
        mapped = text.map(truth)
        bad = mapped.isna().to_numpy() | missing
        for i in np.flatnonzero(bad & ~missing):
            reasons[i] = f"not true/false: {series.iloc[i]!r}"
        return mapped.astype("object"), bad, missing, reasons
    if series.dtype.kind == "f":
        text = id_text(series)  # a whole-number code read as float: "3", not "3.0"
    else:
        text = series.astype("string").str.strip()
    bad = missing.copy()
    if spec.choices is not None:
        lowered = text.str.lower()
        wrong = ~bad & ~lowered.isin(spec.choices).fillna(False).to_numpy()
        for i in np.flatnonzero(wrong):
            reasons[i] = f"{text.iloc[i]!r} is not one of {', '.join(spec.choices)}"
        bad = bad | wrong
        text = lowered
    if spec.check is not None:  # a rule of the field's own, e.g. a ';'-separated list
        for i in np.flatnonzero(~bad):
            _value, problem = spec.check(text.iloc[i])
            if problem:
                reasons[i] = problem
                bad[i] = True
    return text.astype("object"), bad, missing, reasons


def attributes(gdf, src, specs, defaults, ids, rejected, warnings, allow_defaults,
                keep_mask, filled) -> pd.DataFrame:
    """Validate and coerce every field of ``specs``; update ``keep_mask`` in place.

    A present but invalid value (out of range, not a number, not one of the
    choices) rejects the feature. A missing value (NULL or blank) takes the
    default when ``allow_defaults`` and a default exists, else rejects the
    feature. ``filled`` receives, per canonical field, the mask of features
    whose value came from a default (every feature when the column is absent).
    """
    out = {}
    role = src.role
    for spec in specs:
        user = src.fields.get(spec.name, spec.name)
        default = defaults.get(spec.name, spec.default)
        if user not in gdf.columns:
            if spec.name in src.fields:
                cols = ", ".join(str(c) for c in gdf.columns if c != gdf.geometry.name)
                raise InputError(f"layer {src.label}: field '{user}' (mapped to corridor field"
                                 f" '{spec.name}') is not in the layer; its fields are: {cols}")
            if default is None:
                raise InputError(f"layer {src.label}: field '{user}' (corridor field"
                                 f" '{spec.name}') is missing and has no default")
            out[spec.name] = pd.Series([default] * len(gdf), index=gdf.index, dtype="object")
            filled[spec.name] = np.ones(len(gdf), bool)
            log.debug("layer %s: field '%s' absent; default %r used for all features",
                      src.label, user, default)
            continue
        values, bad, missing, reasons = coerce(gdf[user], spec)
        fill = missing & keep_mask if (default is not None and allow_defaults) else \
            np.zeros(len(gdf), bool)
        reject = bad & ~fill & keep_mask
        for i in np.flatnonzero(reject):
            rejected.add(src.label, ids.iloc[i], user, reasons[i], role)
        keep_mask &= ~reject
        if fill.any():
            values = values.astype("object")
            values.iloc[np.flatnonzero(fill)] = default
            filled[spec.name] = fill
            fids = [str(ids.iloc[i]) for i in np.flatnonzero(fill)]
            msg = (f"layer {src.label}: field '{user}': no value on {len(fids)} feature(s)"
                   f" ({', '.join(fids[:10])}{' ...' if len(fids) > 10 else ''});"
                   f" default {default!r} used")
            warnings.append(msg)
            log.warning(msg)
        out[spec.name] = values
    return pd.DataFrame(out, index=gdf.index)
