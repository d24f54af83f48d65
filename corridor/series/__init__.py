"""Load time series: hours above limit and the ISO 18086 mean, by superposition.

- :mod:`corridor.series.settings`: the ``[load_series]`` config section;
- :mod:`corridor.series.table`: reading and checking the series file;
- :mod:`corridor.series.unit_emf`: each circuit's EMF per ampere, the phasors;
- :mod:`corridor.series.evaluate`: unit responses on the response stage's
  factors, every step by a matrix product, streamed in blocks;
- :mod:`corridor.series.stage`: the per-asset and run-wide stages.

docs/methods.md §15 describes the method.
"""
