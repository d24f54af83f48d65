"""The QGIS Processing provider of corridor, and what it runs on the corridor side.

QGIS runs its own Python (on Debian the system Python), which often lacks the
libraries corridor needs (or has older ones). So the plugin, ``plugin/``
(installed into QGIS from the zip built by ``corridor qgis-plugin --zip``), is a
thin translator that imports only QGIS and the standard library: it turns the
dialog's parameters into a job and hands it to :mod:`corridor.qgis.engine`,
run with corridor's own Python. Nothing is computed in the plugin.

- :mod:`corridor.qgis.adapter` turns the step catalog into algorithm
  declarations (plain JSON shipped in the zip): ONE function reads the catalog.
- :mod:`corridor.qgis.engine` runs one job: the whole screening (the CLI's
  ``run``) or one step (:func:`corridor.steps.catalog.run_step`), streaming
  progress, log warnings and the result as JSON lines.
- :mod:`corridor.qgis.build` writes the plugin zip.
"""
