"""Readings against the model, and calibration of the model to them (docs/methods.md §17).

- :mod:`corridor.reconcile.settings`: the ``[readings]`` and ``[calibration]`` sections;
- :mod:`corridor.reconcile.readings`: read, check and place each reading on its segment;
- :mod:`corridor.reconcile.compare`: predicted against measured, anomalies;
- :mod:`corridor.reconcile.model`: the factors applied in a run;
- :mod:`corridor.reconcile.fit`: the robust least-squares fit of the factors;
- :mod:`corridor.reconcile.run`: the run's readings outputs, and ``corridor calibrate``.

This package imports nothing on import, so :mod:`corridor.config` may use its settings.
"""
