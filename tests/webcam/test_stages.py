"""The two ways of running a clip's stages (overlapped, serial) give the same outputs, file for file.

Reference: the overlapped pipeline, the one every other pipeline test checks against
rendered ground truth; the serial one (batch workers, ``aspectus process --stages serial``)
runs the same computations in one thread, so any difference is an error of the ordering.
"""
from __future__ import annotations

import json

import pandas as pd
import pytest

from aspectus.errors import ParameterError
from aspectus.webcam.pipeline import process_clip, resolve_stages

pytestmark = pytest.mark.slow


def test_serial_and_overlapped_stages_write_identical_outputs(rendered_clip, tmp_path):
    clip = rendered_clip(duration_s=3.0, seed=11, head_motion=True, name="p12_s01.mp4").path
    a = process_clip(clip, tmp_path / "overlapped", stages="overlapped", reuse=False)
    b = process_clip(clip, tmp_path / "serial", stages="serial", reuse=False)
    pd.testing.assert_frame_equal(a.samples, b.samples, check_exact=True)
    for name in ("samples.parquet", "samples.csv", "events.csv", "features.csv"):
        ra = json.loads((a.out_dir / "run.json").read_text())["outputs"][name]["sha256"]
        rb = json.loads((b.out_dir / "run.json").read_text())["outputs"][name]["sha256"]
        assert ra == rb, name
    ext_a = json.loads((a.out_dir / "run.json").read_text())["extraction"]
    ext_b = json.loads((b.out_dir / "run.json").read_text())["extraction"]
    assert (ext_a["stages"], ext_b["stages"]) == ("overlapped", "serial")
    assert ext_b["geometry_ran_in"] == "inline"
    assert a.summary["fixation_count"] == b.summary["fixation_count"] > 0


def test_stages_come_from_the_environment_and_bad_values_are_refused(monkeypatch):
    monkeypatch.delenv("ASPECTUS_STAGES", raising=False)
    assert resolve_stages() == "overlapped"
    monkeypatch.setenv("ASPECTUS_STAGES", "serial")
    assert resolve_stages() == "serial"
    assert resolve_stages("overlapped") == "overlapped"  # the caller's choice wins
    monkeypatch.setenv("ASPECTUS_STAGES", "sideways")
    with pytest.raises(ParameterError, match="ASPECTUS_STAGES"):
        resolve_stages()
