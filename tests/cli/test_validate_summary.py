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
