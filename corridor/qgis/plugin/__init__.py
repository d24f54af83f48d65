"""corridor's QGIS Processing provider (installed from the zip ``corridor qgis-plugin --zip``).

Imports only QGIS and the standard library: the screening itself runs in
corridor's own Python (see ``engine.json`` and the README).
"""


def classFactory(iface):  # noqa: N802 - the name QGIS looks for
    """QGIS's entry point: the plugin object."""
    from .provider import CorridorPlugin

    return CorridorPlugin(iface)
