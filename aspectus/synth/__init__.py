"""Test material with known truth: rendered webcam clips and simulated lab recordings.

Measures nothing and imports none of the measurement code (an import
contract checks it), so the truth it writes is independent of what
aspectus measures.
"""
from aspectus._lazy import attach as _attach

__getattr__, __dir__, __all__ = _attach(__name__, {
    "render_clip": "aspectus.synth.render",
    "synth_trajectory": "aspectus.synth.trajectory",
    "Trajectory": "aspectus.synth.trajectory",
    "write_demo_reference": "aspectus.synth.lab_recording",
    "schedule_trajectory": "aspectus.synth.target_gaze",
    "render_target_clip": "aspectus.synth.target_gaze",
})
