"""Joining OpenStreetMap ways into electrical lines and whole assets.

OSM splits a line into ways at every junction. Ways with the same key
(voltages, circuits, frequencies, cable, arrangement) are joined where exactly
two of them end at one node; all ways of a ``route=power`` relation are joined
(see :mod:`corridor.io.osm`, which calls :func:`group_ways` and
:func:`merged_geometry`).
"""

from __future__ import annotations

from collections import defaultdict

import shapely

__all__ = ["by_way_id", "chains", "group_ways", "line_key", "merged_geometry", "way_ends"]


def line_key(rec: dict) -> tuple:
    return tuple(rec[k] for k in ("voltages", "circuits", "frequencies", "cable", "arrangement"))


def group_ways(rows: list[dict], join: bool, relations: dict[int, str]):
    """Yield (member rows, id) per electrical line (or asset)."""
    if not join:
        for r in rows:
            yield [r], r["way"]
        return
    by_key: dict[tuple, list[int]] = defaultdict(list)
    rel_members: dict[tuple, list[int]] = defaultdict(list)
    for i, r in enumerate(rows):
        if i in relations:
            rel_members[(relations[i], line_key(r))].append(i)
        else:
            by_key[line_key(r)].append(i)
    out = []
    for (rel, _k), idx in rel_members.items():
        out.append((sorted((rows[i] for i in idx), key=by_way_id), rel))
    for idx in by_key.values():
        for chain in chains([rows[i]["geometry"] for i in idx]):
            members = sorted((rows[idx[c]] for c in chain), key=by_way_id)
            out.append((members, members[0]["way"]))
    seen: dict[str, int] = defaultdict(int)
    for members, ident in out:
        # two groups of one relation with different keys: keep ids unique
        seen[ident] += 1
        yield members, ident if seen[ident] == 1 else f"{ident}#{seen[ident]}"


def way_ends(geom) -> list[tuple[float, float]]:
    parts = shapely.get_parts(geom)
    if len(parts) != 1:  # a multi-part way: not joined through
        return []
    c = shapely.get_coordinates(parts[0])
    return [tuple(c[0]), tuple(c[-1])]


def chains(geoms: list) -> list[list[int]]:
    """Groups of lines joined end to end where exactly two of them end at a node."""
    ends = [way_ends(g) for g in geoms]
    at: dict[tuple, list[int]] = defaultdict(list)
    for i, e in enumerate(ends):
        for p in e:
            at[p].append(i)
    parent = list(range(len(geoms)))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for members in at.values():
        if len(members) == 2 and members[0] != members[1]:
            a, b = find(members[0]), find(members[1])
            if a != b:
                parent[max(a, b)] = min(a, b)
    groups: dict[int, list[int]] = defaultdict(list)
    for i in range(len(geoms)):
        groups[find(i)].append(i)
    return list(groups.values())


def by_way_id(rec: dict) -> tuple:
    """Sort key of member ways: numeric way id (``way/9`` before ``way/10``)."""
    num = rec["way"].rpartition("/")[2]
    return (0, int(num), "") if num.isdigit() else (1, 0, num)


def merged_geometry(geoms: list):
    if len(geoms) == 1:
        return geoms[0]
    return shapely.line_merge(shapely.union_all(geoms))
