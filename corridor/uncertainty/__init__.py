"""Uncertainty bands: an ensemble over the uncertain inputs (docs/methods.md §16).

- :mod:`corridor.uncertainty.settings`: the ``[uncertainty]`` config section;
- :mod:`corridor.uncertainty.ensemble`: members by Latin hypercube, solved and assessed
  (:func:`~corridor.uncertainty.ensemble.stage_bands`, called by
  :func:`corridor.compute.compute`);
- :mod:`corridor.uncertainty.tables`: per-segment and per-asset bands, the deciding input
  (:func:`~corridor.uncertainty.tables.add_band_columns`, called by
  :func:`corridor.compute.finalize`).
"""
