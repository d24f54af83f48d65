"""The computing stages after the exposure geometry, in run order."""

from __future__ import annotations


def default_stages() -> dict:
    """Stages run after ``read`` and ``expose``: name -> function(run)."""
    return {}
