"""The lines ``aspectus validate`` prints after one pair."""
from __future__ import annotations

import pandas as pd


def test_the_validation_summary_prints_no_nan():
    """A figure the validation could not compute (no fixation in one recording: kappa and F1 undefined) reads
    "n/a" in the terminal, not "nan"."""
    from types import SimpleNamespace

    from aspectus.cli.validate_cmd import pair_summary_lines
    from aspectus.validation.align import user_alignment

    ag = pd.DataFrame({"scope": ["window"], "feature": ["fixation_count"], "n": [12], "pearson_r": [float("nan")],
                       "icc": [0.5]})
    r = SimpleNamespace(alignment=user_alignment(-1.25), agreement=ag, events={"kappa": float("nan"), "f1": None},
                        meta={"params": {"window_s": 2.0}}, paths={"report": "val/report.html"})
    text = "\n".join(pair_summary_lines(r))
    assert "nan" not in text.lower() and "kappa n/a" in text and "F1 n/a" in text and "r n/a, ICC 0.50" in text
    assert "the lab tracker started 1.250 s before the webcam (found by the offset given by the user)" in text


def test_the_webcam_clips_own_verdict_is_named_where_it_did_not_trust_fixation_measures():
    """A clip whose own precision check did not trust fixation counts (run.json's precision tier below "events")
    is compared all the same; the terminal and the report's reading say what the clip's check had said, so a
    poor agreement is read as the expected one. A clip trusted for them, or one without a check, adds nothing."""
    from types import SimpleNamespace

    from aspectus.cli.validate_cmd import pair_summary_lines
    from aspectus.validation.align import user_alignment
    from aspectus.validation.pair import webcam_verdict
    from aspectus.validation.report import plain_reading

    run = {"quality": {"precision_tier": "coarse", "usable": True, "noise_sd_deg": 1.09, "noise_rms_s2s_deg": 1.09,
                       "verdict": "Partly usable: face tracked in 100% of frames ..."}}
    ag = pd.DataFrame({"scope": ["window"], "feature": ["fixation_count"], "n": [12], "pearson_r": [0.7],
                       "pearson_ci_low": [0.2], "pearson_ci_high": [0.9], "icc": [0.5], "ba_bias": [-1.2],
                       "ba_loa_low": [-3.0], "ba_loa_high": [0.6], "icc_form": ["ICC(2,1)"]})

    def result(verdict):
        return SimpleNamespace(alignment=user_alignment(-1.25), agreement=ag, events={"kappa": 0.4, "f1": 0.8},
                               notes=[], meta={"params": {"window_s": 2.0}, "webcam_verdict": verdict},
                               paths={"report": "val/report.html"})

    coarse = result(webcam_verdict(run))
    assert "Webcam clip's own check: Partly usable - its precision is too low for fixation counts" in "\n".join(
        pair_summary_lines(coarse))
    assert "own precision check had already rated it too imprecise" in plain_reading(coarse)
    assert "1.09 deg" in plain_reading(coarse)
    for verdict in (webcam_verdict({"quality": run["quality"] | {"precision_tier": "events"}}), webcam_verdict({})):
        r = result(verdict)
        assert "own check" not in "\n".join(pair_summary_lines(r)) and "own precision check" not in plain_reading(r)
    assert webcam_verdict({}) is None and webcam_verdict({"quality": {}}) is None
