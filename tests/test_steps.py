"""Named processing steps: declarations, `corridor steps`, running one step.

Checks against the outside world: shapely's own line lengths and pyogrio's
reading of the layers written; the definitions of the step outputs (segment
length bound, rank order); and the run settings' declared metadata.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import pytest

from corridor.cli import main
from corridor.errors import ConfigError
from corridor.settings import DATA_KINDS, RUN_SETTINGS, DataSpec, Spec
from corridor.steps.catalog import STEPS, StepCancelled, get_step, run_step, step_names

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "config" / "demo.toml"


def test_steps_are_declared_in_run_order_with_setting_metadata():
    assert step_names() == ("read", "segment", "expose", "couple", "respond", "assess",
                            "ground", "rank", "report")
    for spec in STEPS.values():
        assert spec.outputs, spec.name
        for p in spec.parameters:
            # a step's parameter is the run setting's own spec, not a copy
            assert p is RUN_SETTINGS[p.name]
    assert get_step("expose").parameters[2].name == "segment_length_m"
    assert {p.name for p in get_step("expose").outputs} == {"exposures", "segments"}


def test_inputs_and_outputs_are_declared_with_the_settings_spec():
    # one spec type for everything a step takes and gives: DataSpec extends Spec
    for spec in STEPS.values():
        for p in (*spec.inputs, *spec.outputs):
            assert isinstance(p, DataSpec) and isinstance(p, Spec), (spec.name, p.name)
            assert p.dtype in DATA_KINDS
    assert {p.name: p.optional for p in get_step("read").inputs} == {
        "power_lines": False, "assets": False, "soil": True, "grounds": True, "towers": True}
    with pytest.raises(ValueError, match="not one of"):
        DataSpec("segments", "float")


def test_a_saved_input_that_is_no_path_is_refused_naming_it(tmp_path):
    with pytest.raises(ConfigError, match="input segments: expected a path to a line layer"):
        run_step("assess", DEMO, inputs={"segments": 3}, outputs_dir=tmp_path)
    assert not tmp_path.exists() or not any(tmp_path.iterdir())


def test_corridor_steps_lists_steps_and_parameters(capsys):
    assert main(["steps"]) == 0
    out = capsys.readouterr().out
    for name in step_names():
        assert f"\n{name}: " in f"\n{out}"
    # name, type, unit, default, range of one setting, as RUN_SETTINGS declares it
    line = next(s for s in out.splitlines() if s.strip().startswith("segment_length_m"))
    assert line.split()[:4] == ["segment_length_m", "float", "[m]", "default"]
    assert "50.0" in line and "1.0..1000.0" in line
    assert main(["steps", "--json"]) == 0
    import json

    data = json.loads(capsys.readouterr().out)
    assert [s["name"] for s in data] == list(step_names())


def test_segment_step_honours_set_segment_length(tmp_path):
    out = run_step("segment", DEMO, outputs_dir=tmp_path, params={"segment_length_m": "100"})
    seg = pyogrio.read_dataframe(out["segments"], layer="segments")
    # the step's definition: no segment longer than segment_length_m (1 µm: float sums)
    assert seg["length_m"].max() <= 100.0 + 1e-6
    # lengths add up to the asset's length as shapely measures it (rtol 1e-9:
    # float rounding of the segment chainages)
    geom_len = seg.geometry.length.groupby(seg["asset_id"]).sum()
    np.testing.assert_allclose(seg.groupby("asset_id")["length_m"].sum()[geom_len.index],
                               geom_len, rtol=1e-9)
    assets = gpd.read_file(REPO / "sample_layers" / "brackenford_vale.gpkg", layer="fences")
    fences = assets.to_crs("EPSG:32615")
    for fid, length in zip(fences["FENCE_ID"], fences.geometry.length, strict=True):
        assert geom_len[fid] == pytest.approx(length, rel=1e-9)  # pyproj + shapely
    assert (tmp_path / "segment.json").is_file()


@pytest.fixture(scope="module")
def respond_out(tmp_path_factory):
    folder = tmp_path_factory.mktemp("respond")
    return folder, run_step("respond", DEMO, outputs_dir=folder)


def test_expose_writes_exposures_and_segments(tmp_path):
    assert main(["step", "expose", str(DEMO), "--out", str(tmp_path), "-q"]) == 0
    layers = {name for name, _ in pyogrio.list_layers(tmp_path / "expose.gpkg")}
    assert layers == {"exposures", "segments"}
    ex = pyogrio.read_dataframe(tmp_path / "expose.gpkg", layer="exposures")
    # an exposure's projected length cannot exceed its length along the asset
    along = ex["end_chainage_m"] - ex["start_chainage_m"]
    assert (ex["parallel_length_m"] <= along + 1e-6).all()


def test_assess_from_saved_segments_equals_assess_in_memory(respond_out, tmp_path):
    folder, written = respond_out
    saved = run_step("assess", DEMO, inputs={"segments": written["segments"]},
                     outputs_dir=tmp_path / "saved")
    fresh = run_step("assess", DEMO, outputs_dir=tmp_path / "fresh")
    a = pyogrio.read_dataframe(saved["segments"], layer="segments")
    b = pyogrio.read_dataframe(fresh["segments"], layer="segments")
    assert len(a) == len(b) > 0
    # the demo's limit set (ieee_na) has no criterion by coating category, so
    # the saved layer lacking coating_type changes nothing; rtol 1e-12: the
    # same arithmetic on values read back from a GeoPackage
    np.testing.assert_allclose(a["utilization"], b["utilization"], rtol=1e-12)
    assert (a["hazard_class"] == b["hazard_class"]).all()


def test_rank_from_saved_segments_orders_by_utilization(respond_out, tmp_path):
    _, written = respond_out
    out = run_step("rank", DEMO, inputs={"segments": written["segments"]}, outputs_dir=tmp_path)
    t = pyogrio.read_dataframe(out["segments"], layer="segments")
    rank = t["rank"].to_numpy()
    assert sorted(rank) == list(range(1, len(t) + 1))  # a permutation
    by_rank = t["utilization"].to_numpy(float)[np.argsort(rank)]
    assert (np.diff(by_rank) <= 0).all()  # rank 1 is the worst


def test_step_errors_exit_2_and_write_nothing(tmp_path, capsys):
    assert main(["step", "nosuch", str(DEMO), "--out", str(tmp_path)]) == 2
    assert "unknown step 'nosuch'" in capsys.readouterr().err
    assert main(["step", "segment", str(DEMO), "--out", str(tmp_path),
                 "--set", "segment_length_m=5000"]) == 2
    assert "above the valid range" in capsys.readouterr().err
    assert main(["step", "segment", str(DEMO), "--out", str(tmp_path),
                 "--set", "limit_set=iec_en"]) == 2
    assert "not a parameter of step segment" in capsys.readouterr().err
    assert main(["step", "expose", str(DEMO), "--out", str(tmp_path),
                 "--in", "segments=x.gpkg"]) == 2
    assert "cannot start from a saved 'segments' layer" in capsys.readouterr().err
    assert not any(tmp_path.iterdir())


def test_cancel_stops_before_writing(tmp_path):
    seen = []
    with pytest.raises(StepCancelled):
        run_step("respond", DEMO, outputs_dir=tmp_path,
                 progress=lambda fraction, message: seen.append((fraction, message)),
                 cancel=lambda: len(seen) >= 2)
    assert [m for _, m in seen] == ["read", "expose"]
    assert not tmp_path.exists() or not any(tmp_path.iterdir())


def test_unknown_step_is_config_error():
    with pytest.raises(ConfigError):
        get_step("fetch")
