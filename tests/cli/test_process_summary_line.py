"""The line ``aspectus process`` prints per clip: its noise figure is the one the verdict and the precision tier
read (run.json's ``noise_rms_s2s_33ms_deg``, the RMS-S2S over 33 ms steps), as the app's quality panel shows it,
not the per-sample RMS-S2S, which at 60 fps reads lower for the same eyes (Holmqvist, Nystrom & Mulvey 2012 define
the RMS-S2S; the 33 ms step: aspectus.events.detect.noise.REFERENCE_INTERVAL_S)."""
from __future__ import annotations

from types import SimpleNamespace


def test_the_printed_noise_is_the_verdicts(monkeypatch, tmp_path, capsys):
    import aspectus.webcam.pipeline as pipeline
    from aspectus.cli import main

    clip = tmp_path / "class_60fps.mp4"
    clip.write_bytes(b"")  # never read: processing is replaced below
    summary = {"frames": 600, "duration_s": 10.0, "face_found_frac": 1.0, "blink_count": 2, "fixation_count": 20,
               "median_distance_mm": 600.0, "noise_rms_s2s_deg": 0.41, "noise_rms_s2s_33ms_deg": 0.57,
               "noise_sd_deg": 0.48, "verdict": "Usable: noise 0.57 deg sample to sample (over 33 ms steps)."}

    def fake_process_clip(clip_path, out_dir, **kw):
        return SimpleNamespace(summary=summary, out_dir=out_dir, reused_samples=False)

    monkeypatch.setattr(pipeline, "process_clip", fake_process_clip)
    assert main(["process", "--quiet", "-o", str(tmp_path / "out"), str(clip)]) == 0
    line = capsys.readouterr().out.splitlines()[0]
    assert "noise 0.57 deg" in line and "0.41" not in line, line
    assert "SD 0.48 deg" in line, line  # the tier's second figure (SD within fixations) beside it
    # each figure says what it measures, so the two are not read as one noise and its SD
    assert "noise 0.57 deg sample to sample, SD 0.48 deg within fixations" in line, line
    assert "2 blinks, 20 fixations, median eye-to-camera distance 600 mm" in line, line  # which distance it is


def test_a_clip_without_the_figure_prints_no_number(monkeypatch, tmp_path, capsys):
    """No two samples of a fixation 33 ms apart: the verdict says the noise is not measurable, and so does the
    line (not the per-sample figure in its place)."""
    import aspectus.webcam.pipeline as pipeline
    from aspectus.cli import main

    clip = tmp_path / "c.mp4"
    clip.write_bytes(b"")
    summary = {"frames": 3, "duration_s": 0.1, "face_found_frac": 1.0, "blink_count": 0, "fixation_count": 0,
               "median_distance_mm": 600.0, "noise_rms_s2s_deg": 0.3, "noise_rms_s2s_33ms_deg": float("nan"),
               "verdict": "Usable."}
    monkeypatch.setattr(pipeline, "process_clip",
                        lambda c, o, **kw: SimpleNamespace(summary=summary, out_dir=o, reused_samples=False))
    assert main(["process", "--quiet", "-o", str(tmp_path / "out"), str(clip)]) == 0
    line = capsys.readouterr().out.splitlines()[0]
    assert "0.30" not in line and "noise n/a" in line and "SD n/a" in line, line
