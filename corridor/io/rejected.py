"""Features that could not be used: the rows of ``rejected.csv`` and their log lines.

Nothing is lost silently: every input feature is either kept or has a row here
naming the layer, the feature id, the field and the reason.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import pandas as pd

log = logging.getLogger(__name__)

#: Roles of the rows of :class:`Rejected`: which kind of input a rejected feature was.
REJECT_ROLES = ("power_lines", "assets", "soil", "grounds", "towers", "substations")
#: Columns of :meth:`Rejected.frame` (and of ``rejected.csv``).
REJECT_COLUMNS = ["layer", "feature_id", "field", "reason", "role"]


@dataclass
class Rejected:
    """Features that could not be used, one row each.

    Each row is a dict with ``layer``, ``feature_id``, ``field``, ``reason``
    and ``role`` (one of :data:`REJECT_ROLES`): a rejected power line leaves
    the screen incomplete, a rejected asset leaves that asset unscreened.
    """

    rows: list[dict] = field(default_factory=list)

    def add(self, layer: str, feature_id, fld: str, reason: str, role: str = "assets") -> None:
        """Record one rejected feature.

        Parameters
        ----------
        layer : str
            Layer label (``file:layer``).
        feature_id : object
            Id of the feature (stored as text).
        fld : str
            The user's field name at fault, or ``"geometry"``.
        reason : str
            Why the feature was rejected.
        role : str
            One of :data:`REJECT_ROLES`.
        """
        if role not in REJECT_ROLES:
            raise ValueError(f"unknown role {role!r}; expected one of {', '.join(REJECT_ROLES)}")
        self.rows.append({"layer": layer, "feature_id": str(feature_id), "field": fld,
                          "reason": reason, "role": role})

    def by_role(self, role: str) -> list[dict]:
        """The rows of one role (see :data:`REJECT_ROLES`), in the order they were added."""
        return [r for r in self.rows if r.get("role") == role]

    def frame(self) -> pd.DataFrame:
        """All rows as a table with the columns :data:`REJECT_COLUMNS`."""
        frame = pd.DataFrame(self.rows, columns=REJECT_COLUMNS)
        frame["role"] = frame["role"].fillna("")
        return frame


#: Rejected assets (and other features) named one by one in the log; the rest are counted.
REJECTED_SHOWN = 20


def log_rejected(rejected: Rejected) -> None:
    """WARNING lines for rejected features: every power line, then a bounded list of the rest.

    A rejected power line leaves the voltages it induces unassessed, so each one is
    named; assets and other features are named up to :data:`REJECTED_SHOWN` per role
    and then counted (every one is in rejected.csv).
    """
    for row in rejected.by_role("power_lines"):
        log.warning("power line %s rejected (layer %s, field '%s'): %s; the voltages it"
                    " induces are NOT assessed and the results are incomplete",
                    row["feature_id"], row["layer"], row["field"], row["reason"])
    for role, what in (("assets", "asset"), ("soil", "soil polygon"),
                       ("grounds", "ground item"), ("towers", "tower"),
                       ("substations", "substation")):
        rows = rejected.by_role(role)
        for row in rows[:REJECTED_SHOWN]:
            log.warning("%s %s rejected (layer %s, field '%s'): %s", what, row["feature_id"],
                        row["layer"], row["field"], row["reason"])
        if len(rows) > REJECTED_SHOWN:
            log.warning("... and %d more rejected %ss (every one is in rejected.csv)",
                        len(rows) - REJECTED_SHOWN, what)
