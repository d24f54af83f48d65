"""A Processing algorithm made from one declaration of ``algorithms.json``.

The algorithm only translates: dialog parameters -> a job (JSON) -> corridor's
engine (``python -m corridor.qgis.engine JOB``, run with corridor's Python) ->
progress, messages and outputs back into QGIS. Layers that are not plain files
(memory layers, database layers, filtered layers) are saved to a temporary
GeoPackage first. Nothing is computed here.
"""

from __future__ import annotations

import json
import os
import queue
import shutil
import subprocess
import tempfile
import threading
import time
from typing import Any

from qgis.core import (
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingException,
    QgsProcessingOutputFile,
    QgsProcessingOutputFolder,
    QgsProcessingOutputHtml,
    QgsProcessingOutputVectorLayer,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFile,
    QgsProcessingParameterFolderDestination,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsProcessingParameterVectorLayer,
    QgsProviderRegistry,
    QgsVectorFileWriter,
)
from qgis.PyQt.QtGui import QIcon

HERE = os.path.dirname(os.path.abspath(__file__))
CONFIG = "CONFIG"
OUTPUT = "OUTPUT"
#: Seconds the engine gets to stop cleanly after a cancel before it is killed.
CANCEL_GRACE_S = 60.0

_GEOMETRY = {"line": QgsProcessing.TypeVectorLine, "polygon": QgsProcessing.TypeVectorPolygon,
             "point": QgsProcessing.TypeVectorPoint}
_BOOL = ["from the config", "true", "false"]
_FILE_EXT = (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gml", ".kml", ".sqlite",
             ".osm", ".pbf", ".parquet", ".tab", ".gdb")


def engine_command() -> tuple[list[str], dict]:
    """Command and environment of corridor's engine.

    ``engine.json`` (written when the zip was built) names the Python that has
    corridor and its libraries, and the folder to put on its path;
    the environment variables ``CORRIDOR_PYTHON`` and ``CORRIDOR_PATH`` override them.
    """
    info = {}
    path = os.path.join(HERE, "engine.json")
    if os.path.exists(path):
        with open(path, encoding="utf-8") as fh:
            info = json.load(fh)
    python = os.environ.get("CORRIDOR_PYTHON") or info.get("python") or "python3"
    env = dict(os.environ)
    for key in ("PYTHONHOME", "PYTHONPATH"):  # QGIS's Python's, not corridor's
        env.pop(key, None)
    extra = os.environ.get("CORRIDOR_PATH") or info.get("pythonpath") or ""
    if extra:
        env["PYTHONPATH"] = extra
    env["CORRIDOR_PROGRESS"] = "0"
    return [python, "-m", "corridor.qgis.engine"], env


class CorridorAlgorithm(QgsProcessingAlgorithm):
    """One step of corridor's catalog, or the whole screening ("Screen corridor")."""

    def __init__(self, spec: dict):
        super().__init__()
        self.spec = spec

    # -- identity ---------------------------------------------------------------
    def createInstance(self):  # noqa: N802 - QGIS API
        return CorridorAlgorithm(self.spec)

    def name(self):
        return self.spec["id"]

    def displayName(self):  # noqa: N802 - QGIS API
        return self.spec["name"]

    def group(self):
        return self.spec["group"]

    def groupId(self):  # noqa: N802 - QGIS API
        return self.spec["group"].lower()

    def shortHelpString(self):  # noqa: N802 - QGIS API
        return (self.spec["help"] + "\n\nParameters left empty take the run configuration's"
                " value. Screening estimates for planning, not a substitute for a study by a"
                " licensed engineer under local codes and the asset owner's procedures; treat"
                " metal near energised lines as possibly energised.")

    def icon(self):
        return QIcon(os.path.join(HERE, "icon.svg"))

    # -- parameters ---------------------------------------------------------------
    def initAlgorithm(self, config=None):  # noqa: N802 - QGIS API
        self.addParameter(QgsProcessingParameterFile(
            CONFIG, "Run configuration (TOML file)", extension="toml"))
        for p in self.spec["inputs"]:
            label = p["label"] + " Empty: the config's layer."
            if p["multiple"]:
                param = QgsProcessingParameterMultipleLayers(
                    p["name"], label, _GEOMETRY[p["geometry"]], optional=True)
            else:
                param = QgsProcessingParameterVectorLayer(
                    p["name"], label, [_GEOMETRY[p["geometry"]]], optional=True)
            self.addParameter(param)
        for p in self.spec["parameters"]:
            param = self._parameter(p)
            param.setFlags(param.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
            param.setHelp(p["help"])
            self.addParameter(param)
        self.addParameter(QgsProcessingParameterFolderDestination(OUTPUT, "Output folder"))
        for o in self.spec["outputs"]:
            if o["kind"] == "layer":
                self.addOutput(QgsProcessingOutputVectorLayer(o["name"], o["name"]))
            elif o["kind"] == "html":
                self.addOutput(QgsProcessingOutputHtml(o["name"], "Screening report"))
            else:
                self.addOutput(QgsProcessingOutputFile(o["name"], o["file"]))
        self.addOutput(QgsProcessingOutputFolder("FOLDER", "Output folder"))

    @staticmethod
    def _parameter(p: dict):
        if p["kind"] in ("number", "integer"):
            kind = (QgsProcessingParameterNumber.Double if p["kind"] == "number"
                    else QgsProcessingParameterNumber.Integer)
            param = QgsProcessingParameterNumber(p["name"], p["label"], kind, None, True)
            if p.get("min") is not None:
                param.setMinimum(p["min"])
            if p.get("max") is not None:
                param.setMaximum(p["max"])
            return param
        if p["kind"] == "bool":
            return QgsProcessingParameterEnum(p["name"], p["label"], _BOOL, False, 0, True)
        if p["kind"] == "choice":
            return QgsProcessingParameterEnum(p["name"], p["label"],
                                              ["from the config", *p["choices"]], False, 0, True)
        if p["kind"] == "multichoice":  # none chosen: the config's
            return QgsProcessingParameterEnum(p["name"], p["label"], p["choices"], True, None,
                                              True)
        return QgsProcessingParameterString(p["name"], p["label"], None, False, True)

    # -- running -------------------------------------------------------------------
    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 - QGIS API
        work = tempfile.mkdtemp(prefix="corridor-qgis-")
        try:
            job = self._job(parameters, context, feedback, work)
            return self._run(job, context, feedback, work)
        finally:
            shutil.rmtree(work, ignore_errors=True)

    def _job(self, parameters, context, feedback, work) -> dict:
        config = self.parameterAsFile(parameters, CONFIG, context)
        if not config:
            raise QgsProcessingException("choose the run configuration (a TOML file)")
        layers: dict[str, Any] = {}  # a layer's source, or a list of them
        for p in self.spec["inputs"]:
            if p["multiple"]:
                chosen = self.parameterAsLayerList(parameters, p["name"], context)
                if chosen:
                    layers[p["name"]] = [_source(lyr, context, feedback, work)
                                         for lyr in chosen]
            else:
                lyr = self.parameterAsVectorLayer(parameters, p["name"], context)
                if lyr is not None:
                    layers[p["name"]] = _source(lyr, context, feedback, work)
        inputs = {}
        for p in self.spec["inputs"]:
            if p.get("saved") and p["name"] in layers:
                inputs[p["name"]] = layers.pop(p["name"])["path"]
        params = {}
        for p in self.spec["parameters"]:
            value = parameters.get(p["name"])
            if value is None or value == "":
                continue
            if p["kind"] == "bool":
                index = self.parameterAsEnum(parameters, p["name"], context)
                if index:
                    params[p["name"]] = index == 1
            elif p["kind"] == "choice":
                index = self.parameterAsEnum(parameters, p["name"], context)
                if index:
                    params[p["name"]] = p["choices"][index - 1]
            elif p["kind"] == "multichoice":
                indices = self.parameterAsEnums(parameters, p["name"], context)
                if indices:
                    params[p["name"]] = [p["choices"][i] for i in indices]
            elif p["kind"] == "number":
                params[p["name"]] = self.parameterAsDouble(parameters, p["name"], context)
            elif p["kind"] == "integer":
                params[p["name"]] = self.parameterAsInt(parameters, p["name"], context)
            elif p["kind"] == "list":
                text = self.parameterAsString(parameters, p["name"], context)
                items = [v.strip().strip("'\"") for v in text.strip("[]").split(",") if v.strip()]
                try:
                    params[p["name"]] = ([float(v) for v in items] if p.get("type") != "str_list"
                                         and all(_is_number(v) for v in items) else items)
                except ValueError:
                    params[p["name"]] = items
            else:
                params[p["name"]] = self.parameterAsString(parameters, p["name"], context)
        out_dir = self.parameterAsString(parameters, OUTPUT, context)
        return {"mode": self.spec["mode"], "step": self.spec["step"], "config": config,
                "layers": layers, "inputs": inputs, "params": params, "out_dir": out_dir,
                "cancel_file": os.path.join(work, "cancel")}

    def _run(self, job, context, feedback, work) -> dict:
        job_path = os.path.join(work, "job.json")
        with open(job_path, "w", encoding="utf-8") as fh:
            json.dump(job, fh)
        cmd, env = engine_command()
        feedback.pushInfo(f"corridor engine: {cmd[0]}")
        proc = subprocess.Popen(cmd + [job_path], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, env=env, text=True, encoding="utf-8",
                                errors="replace")
        lines: queue.Queue = queue.Queue()
        threading.Thread(target=_pump, args=(proc.stdout, lines), daemon=True).start()
        stderr: list[str] = []
        threading.Thread(target=_collect, args=(proc.stderr, stderr), daemon=True).start()
        result, error, cancelled, errors = None, None, False, []
        cancel_at = None
        while True:
            if feedback.isCanceled() and cancel_at is None:
                feedback.pushInfo("cancelling: corridor stops at its next check and leaves the"
                                  " previous outputs in place")
                open(job["cancel_file"], "w").close()
                cancel_at = time.monotonic()
            if cancel_at is not None and time.monotonic() - cancel_at > CANCEL_GRACE_S:
                proc.kill()
            try:
                line = lines.get(timeout=0.2)
            except queue.Empty:
                if proc.poll() is not None and lines.empty():
                    break
                continue
            if line is None:
                break
            try:
                msg = json.loads(line)
            except ValueError:
                feedback.pushConsoleInfo(line.rstrip())
                continue
            if "progress" in msg:
                feedback.setProgress(100.0 * float(msg["progress"]))
                feedback.setProgressText(str(msg.get("message", "")))
            elif "log" in msg:
                if msg["log"] in ("ERROR", "CRITICAL"):
                    errors.append(msg["message"])
                    feedback.reportError(msg["message"])
                else:
                    feedback.pushWarning(msg["message"])
            elif "result" in msg:
                result = msg["result"]
            elif "error" in msg:
                error = msg["error"]
            elif msg.get("cancelled"):
                cancelled = True
        proc.wait()
        for pipe in (proc.stdout, proc.stderr):  # both opened as pipes above
            if pipe is not None:
                pipe.close()
        for text in stderr:
            feedback.pushConsoleInfo(text.rstrip())
        if cancelled or (cancel_at is not None and result is None):
            feedback.pushInfo("cancelled; the previous outputs are left in place")
            return {}
        if error is not None:
            for problem in error["problems"]:
                feedback.reportError(problem)
            raise QgsProcessingException(f"corridor: {error['type']}:\n"
                                         + "\n".join(error["problems"]))
        if result is None:
            raise QgsProcessingException("corridor's engine stopped without a result (exit"
                                         f" {proc.returncode}): " + "".join(stderr[-20:]))
        code = result["exit_code"]
        for row in result.get("rejected", []):
            feedback.pushWarning(f"rejected {row.get('role', '')}: layer {row['layer']},"
                                 f" feature {row['feature_id']}, field {row['field']}:"
                                 f" {row['reason']}")
        if code == 5:
            feedback.pushWarning("a power line was rejected: the outputs are published but"
                                 " INCOMPLETE (see rejected.csv and the report)")
        elif code not in (0, 1):
            raise QgsProcessingException(f"corridor run failed (exit {code}):\n"
                                         + "\n".join(errors or stderr[-20:]))
        return self._outputs(result, context)

    def _outputs(self, result, context) -> dict:
        out_dir = result["out_dir"]
        outputs = {"FOLDER": out_dir, OUTPUT: out_dir}
        for o in self.spec["outputs"]:
            path = os.path.join(out_dir, o["file"])
            if not os.path.exists(path):
                continue
            if o["kind"] == "layer":
                if not _has_layer(path, o["layer"]):
                    continue
                uri = f"{path}|layername={o['layer']}"
                outputs[o["name"]] = uri
                details = context.LayerDetails(o["layer"], context.project(), o["name"])
                context.addLayerToLoadOnCompletion(uri, details)
            else:
                outputs[o["name"]] = path
        return outputs


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _has_layer(path: str, layer: str) -> bool:
    from qgis.core import QgsVectorLayer

    return QgsVectorLayer(f"{path}|layername={layer}", layer, "ogr").isValid()


def _pump(stream, out: queue.Queue) -> None:
    for line in stream:
        out.put(line)
    out.put(None)


def _collect(stream, out: list) -> None:
    for line in stream:
        out.append(line)


def _source(layer, context, feedback, work: str) -> dict:
    """Where corridor reads ``layer``: its file, or a temporary GeoPackage copy.

    A layer read from a file by GDAL (provider ``ogr``) without a filter is
    read from that file; anything else (a memory layer, a database layer, a
    filtered layer) is saved to ``<work>/<layer name>.gpkg`` (layer of the same
    name) with its CRS, so that corridor's messages name the layer as QGIS does.
    """
    if layer.providerType() == "ogr" and not layer.subsetString():
        parts = QgsProviderRegistry.instance().decodeUri("ogr", layer.source())
        path = parts.get("path", "")
        if path and os.path.exists(path) and path.lower().endswith(_FILE_EXT):
            return {"path": path, "layer": parts.get("layerName") or None}
    name = "".join(c if c.isalnum() or c in "-_ " else "_" for c in layer.name()) or "layer"
    target = os.path.join(work, f"{name}.gpkg")
    n = 1
    while os.path.exists(target):
        n += 1
        target = os.path.join(work, f"{name}_{n}.gpkg")
    options = QgsVectorFileWriter.SaveVectorOptions()
    options.driverName = "GPKG"
    options.layerName = name
    options.fileEncoding = "UTF-8"
    writer = getattr(QgsVectorFileWriter, "writeAsVectorFormatV3", None)
    if writer is not None:
        res = writer(layer, target, context.transformContext(), options)
    else:  # QGIS before 3.20
        res = QgsVectorFileWriter.writeAsVectorFormatV2(layer, target,
                                                        context.transformContext(), options)
    if res[0] != QgsVectorFileWriter.NoError:
        raise QgsProcessingException(f"layer {layer.name()}: cannot be saved for corridor:"
                                     f" {res[1] if len(res) > 1 else res[0]}")
    feedback.pushInfo(f"layer {layer.name()} ({layer.providerType()}) saved to a temporary"
                      f" GeoPackage for corridor")
    return {"path": target, "layer": name}
