"""The Processing provider: one algorithm per declaration in ``algorithms.json``."""

from __future__ import annotations

import json
import os

from qgis.core import QgsApplication, QgsProcessingProvider
from qgis.PyQt.QtGui import QIcon

from .algorithm import CorridorAlgorithm

HERE = os.path.dirname(os.path.abspath(__file__))


def declarations() -> list[dict]:
    """The algorithm declarations generated from corridor's step catalog at build time."""
    with open(os.path.join(HERE, "algorithms.json"), encoding="utf-8") as fh:
        return json.load(fh)


class CorridorProvider(QgsProcessingProvider):
    """Processing provider ``corridor``."""

    def id(self):  # noqa: A003 - QGIS API
        return "corridor"

    def name(self):
        return "corridor"

    def longName(self):  # noqa: N802 - QGIS API
        return "corridor: induced-voltage screening of power-line corridors"

    def icon(self):
        return QIcon(os.path.join(HERE, "icon.svg"))

    def loadAlgorithms(self):  # noqa: N802 - QGIS API
        for spec in declarations():
            self.addAlgorithm(CorridorAlgorithm(spec))


class CorridorPlugin:
    """Registers the provider when QGIS starts the plugin."""

    def __init__(self, iface=None):
        self.iface = iface
        self.provider = None

    def initProcessing(self):  # noqa: N802 - QGIS API
        self.provider = CorridorProvider()
        QgsApplication.processingRegistry().addProvider(self.provider)

    def initGui(self):  # noqa: N802 - QGIS API
        self.initProcessing()

    def unload(self):
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
