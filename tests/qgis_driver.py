"""Drive corridor's QGIS plugin in a headless QGIS (run by tests/test_qgis.py).

Runs under the Python QGIS uses (``/usr/bin/python3`` on Debian), not the
project's: it imports only QGIS, QGIS's Processing framework and the
installed plugin. Usage::

    python3 qgis_driver.py PLUGINS_DIR TASK.json RESULT.json

TASK holds ``actions``, run in order; RESULT receives one entry per action.
PLUGINS_DIR ``-`` starts QGIS without Processing and the plugin (the actions
``inspect`` and ``render`` need neither).
"""

from __future__ import annotations

import hashlib
import json
import os
import sys


def _hashes(folder: str) -> dict:
    out = {}
    for root, _dirs, files in os.walk(folder):
        for name in files:
            path = os.path.join(root, name)
            with open(path, "rb") as fh:
                out[os.path.relpath(path, folder)] = hashlib.sha256(fh.read()).hexdigest()
    return out


def main(plugins: str, task_path: str, result_path: str) -> int:
    sys.path.insert(0, "/usr/share/qgis/python/plugins")  # QGIS's Processing framework
    sys.path.insert(0, plugins)
    from qgis.core import (
        QgsApplication,
        QgsFeatureRequest,
        QgsProcessingContext,
        QgsProcessingFeedback,
        QgsProject,
        QgsVectorLayer,
    )

    app = QgsApplication([], False)
    app.initQgis()
    registry = None
    if plugins != "-":
        from processing.core.Processing import Processing

        Processing.initialize()
        import corridor_qgis

        plugin = corridor_qgis.classFactory(None)
        plugin.initProcessing()
        registry = QgsApplication.processingRegistry()
    with open(task_path, encoding="utf-8") as fh:
        task = json.load(fh)
    results = []

    def layer(spec):
        if isinstance(spec, dict) and spec.get("memory"):
            src = QgsVectorLayer(spec["memory"], spec["name"], "ogr")
            assert src.isValid(), spec
            mem = src.materialize(QgsFeatureRequest())
            mem.setName(spec["name"])
            if spec.get("drop_field"):
                mem.startEditing()
                mem.deleteAttribute(mem.fields().indexOf(spec["drop_field"]))
                mem.commitChanges()
            QgsProject.instance().addMapLayer(mem)
            return mem
        lyr = QgsVectorLayer(spec, os.path.basename(spec), "ogr")
        assert lyr.isValid(), spec
        return lyr

    class Feedback(QgsProcessingFeedback):
        def __init__(self, cancel_at=None):
            super().__init__()
            self.messages = {"info": [], "warning": [], "error": []}
            self.progress = []
            self.cancel_at = cancel_at
            self.progressChanged.connect(self._progress)

        def _progress(self, value):
            self.progress.append(value)
            if self.cancel_at is not None and value >= self.cancel_at:
                self.cancel()

        def pushInfo(self, text):  # noqa: N802 - QGIS API
            self.messages["info"].append(text)

        def pushWarning(self, text):  # noqa: N802 - QGIS API
            self.messages["warning"].append(text)

        def reportError(self, text, fatal=False):  # noqa: N802 - QGIS API
            self.messages["error"].append(text)

    for action in task["actions"]:
        what = action["do"]
        if what == "list":
            provider = registry.providerById("corridor")
            algs = {}
            for alg in provider.algorithms():
                algs[alg.id()] = {
                    "name": alg.displayName(),
                    "parameters": {p.name(): {"type": p.type(), "label": p.description()}
                                   for p in alg.parameterDefinitions()},
                    "outputs": [o.name() for o in alg.outputDefinitions()]}
            results.append({"algorithms": algs})
        elif what == "run":
            alg = registry.algorithmById(action["algorithm"])
            params = dict(action["params"])
            for key in action.get("layers", {}):
                value = action["layers"][key]
                params[key] = [layer(v) for v in value] if isinstance(value, list) \
                    else layer(value)
            out = params.get("OUTPUT")
            before = _hashes(out) if out and os.path.isdir(out) else {}
            context = QgsProcessingContext()
            context.setProject(QgsProject.instance())
            feedback = Feedback(action.get("cancel_at"))
            try:
                res, ok = alg.run(params, context, feedback)
                exception = None
            except Exception as exc:  # QgsProcessingException from processAlgorithm
                res, ok, exception = {}, False, str(exc)
            after = _hashes(out) if out and os.path.isdir(out) else {}
            results.append({"ok": ok, "result": res, "exception": exception,
                            "messages": feedback.messages, "progress": feedback.progress,
                            "canceled": feedback.isCanceled(), "before": before,
                            "after": after,
                            "to_load": sorted(context.layersToLoadOnCompletion())})
        elif what == "render":
            results.append(render(action))
        elif what == "inspect":
            results.append(inspect(action))
    with open(result_path, "w", encoding="utf-8") as fh:
        json.dump(results, fh, default=str)
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(0)  # QGIS's Python bindings may crash while tearing down; the results are saved


def inspect(action: dict) -> dict:
    """Load layers as a QGIS user does and report what QGIS made of them.

    ``action["layers"]``: ``[[uri, name, provider], ...]``. Per layer: valid,
    CRS, feature count, fields (name, type, alias), renderer type and its
    classes or rules, labels, and the styles QGIS lists in the data source.
    """
    from qgis.core import QgsVectorLayer

    out = {}
    for uri, name, provider in action["layers"]:
        lyr = QgsVectorLayer(uri, name, provider)
        info = {"valid": lyr.isValid()}
        if lyr.isValid():
            renderer = lyr.renderer()
            info.update({
                "crs": lyr.crs().authid(),
                "features": lyr.featureCount(),
                "geometry": lyr.geometryType(),
                "fields": [[f.name(), f.typeName(), f.alias()] for f in lyr.fields()],
                "renderer": renderer.type() if renderer else None,
                "labels": lyr.labelsEnabled(),
                "label_field": (lyr.labeling().settings().fieldName
                                if lyr.labelsEnabled() and lyr.labeling() else None),
            })
            if renderer is not None and renderer.type() == "RuleRenderer":
                info["rules"] = [[r.label(), r.filterExpression()]
                                 for r in renderer.rootRule().children()]
            elif renderer is not None and renderer.type() == "categorizedSymbol":
                info["rules"] = [[c.label(), str(c.value())] for c in renderer.categories()]
            elif renderer is not None and renderer.type() == "graduatedSymbol":
                info["rules"] = [[r.label(), r.lowerValue()] for r in renderer.ranges()]
            if provider == "ogr":
                listed = lyr.listStylesInDatabase()
                info["styles"] = {"count": listed[0], "names": list(listed[2])}
            ext = lyr.extent()
            info["extent"] = [ext.xMinimum(), ext.yMinimum(), ext.xMaximum(), ext.yMaximum()]
        else:
            info["error"] = lyr.error().summary()
        out[name] = info
    return out


def render(action: dict) -> dict:
    """Render output layers (with the styles embedded in the GeoPackage) to a PNG."""
    from qgis.core import (
        QgsMapRendererParallelJob,
        QgsMapSettings,
        QgsRectangle,
        QgsVectorLayer,
    )
    from qgis.PyQt.QtCore import QSize
    from qgis.PyQt.QtGui import QColor

    layers = []
    for uri, name in action["layers"]:
        lyr = QgsVectorLayer(uri, name, "ogr")
        assert lyr.isValid(), uri
        layers.append(lyr)
    settings = QgsMapSettings()
    settings.setLayers(layers[::-1])  # the task lists them bottom first; QGIS wants top first
    settings.setDestinationCrs(layers[0].crs())
    extent = QgsRectangle(layers[0].extent())
    for lyr in layers[1:]:
        extent.combineExtentWith(lyr.extent())
    extent.scale(1.05)
    settings.setExtent(extent)
    settings.setOutputSize(QSize(*action.get("size", (1000, 700))))
    settings.setBackgroundColor(QColor(255, 255, 255))
    job = QgsMapRendererParallelJob(settings)
    job.start()
    job.waitForFinished()
    image = job.renderedImage()
    image.save(action["png"], "PNG")
    renderers = {lyr.name(): lyr.renderer().type() for lyr in layers}
    return {"png": action["png"], "renderers": renderers,
            "width": image.width(), "height": image.height()}


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:4]))
