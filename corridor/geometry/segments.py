"""Splitting linear features into straight segments of bounded length.

Everything is vectorised over all features at once with shapely 2 and numpy:
no Python loop per feature or per segment.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import cast

import numpy as np
import shapely


@dataclass
class Segments:
    """Straight pieces of linear features, in feature order then along each feature.

    Attributes
    ----------
    feature : ndarray of int
        Index of the feature each segment belongs to.
    part : ndarray of int
        Part number inside a MultiLineString (0 for a LineString).
    x0_m, y0_m, x1_m, y1_m : ndarray of float
        Start and end coordinates in the run CRS [m].
    chainage_m : ndarray of float
        Distance from the feature's start to the segment's start, along the
        feature, over its parts in order [m].
    length_m : ndarray of float
        Segment length [m].
    """

    feature: np.ndarray
    part: np.ndarray
    x0_m: np.ndarray
    y0_m: np.ndarray
    x1_m: np.ndarray
    y1_m: np.ndarray
    chainage_m: np.ndarray
    length_m: np.ndarray

    def __len__(self) -> int:
        return len(self.feature)

    def geometries(self) -> np.ndarray:
        """Segments as shapely LineStrings."""
        coords = np.stack([np.column_stack([self.x0_m, self.y0_m]),
                           np.column_stack([self.x1_m, self.y1_m])], axis=1)
        # a stack of coordinate pairs gives an array of lines; the stubs cannot tell the
        # array's dimensions and allow a single LineString too
        return cast(np.ndarray, shapely.linestrings(coords))

    def take(self, index: np.ndarray) -> Segments:
        return Segments(*(getattr(self, f)[index] for f in (
            "feature", "part", "x0_m", "y0_m", "x1_m", "y1_m", "chainage_m", "length_m")))


def _group_arange(counts: np.ndarray) -> np.ndarray:
    """0..n-1 for each group of the given sizes, concatenated."""
    total = int(counts.sum())
    starts = np.repeat(np.cumsum(counts) - counts, counts)
    return np.arange(total) - starts


def split_lines(geometries: np.ndarray, max_length_m: float | None) -> Segments:
    """Split LineStrings and MultiLineStrings into straight segments.

    Every vertex-to-vertex edge is divided into ``ceil(edge / max_length_m)``
    equal pieces, so segments follow the feature exactly and none is longer
    than ``max_length_m``. Zero-length edges (repeated vertices) are dropped.

    Parameters
    ----------
    geometries : ndarray of shapely geometries
        Linear features in a metric CRS.
    max_length_m : float or None
        Largest segment length [m]; None keeps the edges whole.

    Returns
    -------
    Segments
    """
    parts, feature_of_part = shapely.get_parts(geometries, return_index=True)
    coords, part_of_coord = shapely.get_coordinates(parts, return_index=True)
    same = part_of_coord[1:] == part_of_coord[:-1]
    start = np.flatnonzero(same)
    x0 = coords[start, 0]
    y0 = coords[start, 1]
    x1 = coords[start + 1, 0]
    y1 = coords[start + 1, 1]
    edge_part = part_of_coord[start]
    edge_len = np.hypot(x1 - x0, y1 - y0)
    keep = edge_len > 0.0
    x0, y0, x1, y1, edge_part, edge_len = (a[keep] for a in (x0, y0, x1, y1, edge_part, edge_len))
    if max_length_m is None:
        n_sub = np.ones(len(edge_len), dtype=np.int64)
    else:
        n_sub = np.maximum(1, np.ceil(edge_len / max_length_m - 1e-9)).astype(np.int64)
    k = _group_arange(n_sub).astype(float)
    n = np.repeat(n_sub.astype(float), n_sub)
    t0 = k / n
    t1 = (k + 1.0) / n
    rx0 = np.repeat(x0, n_sub)
    ry0 = np.repeat(y0, n_sub)
    dx = np.repeat(x1 - x0, n_sub)
    dy = np.repeat(y1 - y0, n_sub)
    sx0 = rx0 + dx * t0
    sy0 = ry0 + dy * t0
    sx1 = rx0 + dx * t1
    sy1 = ry0 + dy * t1
    # Exact end vertices, so consecutive segments share coordinates bit for bit.
    last = k == n - 1
    sx1[last] = x1
    sy1[last] = y1
    inner = np.flatnonzero(k[1:] > 0) + 1
    sx0[inner] = sx1[inner - 1]
    sy0[inner] = sy1[inner - 1]
    length = np.repeat(edge_len / n_sub, n_sub)
    rep_part = np.repeat(edge_part, n_sub)
    part_index = rep_part
    feature = feature_of_part[part_index]
    # part number within the feature
    first_part = np.searchsorted(feature_of_part, feature_of_part, side="left")
    part_no = (np.arange(len(parts)) - first_part)[part_index]
    # chainage restarts at each feature. The running sum is kept in extended
    # precision so a feature's chainage does not pick up the rounding of the
    # features before it (results per asset stay independent of the others).
    csum = np.cumsum(length, dtype=np.longdouble)
    before = csum - length
    if len(feature):
        new_feature = np.r_[True, feature[1:] != feature[:-1]]
        base = np.maximum.accumulate(np.where(new_feature, before, np.longdouble(0)))
        chainage = (before - base).astype(float)
    else:
        chainage = before.astype(float)
    return Segments(feature.astype(np.int64), part_no.astype(np.int64), sx0, sy0, sx1, sy1,
                    chainage, length)
