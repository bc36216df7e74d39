"""Event-level agreement: kappa of labels and event matching, checked on the Lund coders' labels."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _lund import FIXATION, cohen_kappa as lund_kappa, load_all, load_trial
from aspectus.validation.agreement import AgreementWarning
from aspectus.validation.event_agreement import cohen_kappa, label_kappa, labels_at, labels_from_events, match_events
from aspectus.reference import events_from_labels


def _fix_labels(codes):
    return np.where(codes == FIXATION, "fixation", "other").astype(object)


def test_coder_vs_coder_kappa_equals_direct_computation(lund_dir):
    """Andersson et al. (2017): two coders' events; kappa through aspectus must equal the direct formula."""
    kappas = []
    for trial in load_all(lund_dir):
        a, b = _fix_labels(trial.labels["MN"]), _fix_labels(trial.labels["RA"])
        direct = lund_kappa(trial.fixation_mask("MN"), trial.fixation_mask("RA"))
        k = label_kappa(trial.t_s, a, trial.t_s, b, bootstrap_reps=50)
        assert k.kappa == pytest.approx(direct, abs=1e-12), trial.name
        assert k.n == len(trial.t_s)
        assert k.ci_low <= k.kappa <= k.ci_high
        # as events: coder RA's fixations as an events table, back to labels on the grid
        ev = events_from_labels(trial.t_s, b)
        k_ev = label_kappa(trial.t_s, a, trial.t_s, labels_from_events(trial.t_s, ev), bootstrap_reps=50)
        assert k_ev.kappa == pytest.approx(direct, abs=1e-12)
        kappas.append(direct)
    # the data set README: coder-vs-coder kappa mean 0.86, range 0.74-0.93 (measured on these 8 trials)
    assert np.mean(kappas) == pytest.approx(0.86, abs=0.01)


def test_kappa_after_alignment_with_offset(lund_dir):
    trial = load_trial(lund_dir, "UH21_img_Rome")
    a = _fix_labels(trial.labels["MN"])
    shift = 0.75
    # the reference is the same labels on a clock that starts 0.75 s later: clip = ref + 0.75
    k = label_kappa(trial.t_s + shift, a, trial.t_s, a, offset_s=shift, bootstrap_reps=20)
    assert k.kappa == pytest.approx(1.0)
    wrong = label_kappa(trial.t_s + shift, a, trial.t_s, a, offset_s=0.0, bootstrap_reps=20)
    assert wrong.kappa < 0.5


def test_event_matching_coders_and_known_cases(lund_dir):
    trial = load_trial(lund_dir, "TH34_img_Europe")
    ev_mn = events_from_labels(trial.t_s, _fix_labels(trial.labels["MN"]))
    ev_ra = events_from_labels(trial.t_s, _fix_labels(trial.labels["RA"]))
    m = match_events(ev_mn, ev_ra, tolerance_s=0.05)
    assert m.n_webcam == (ev_mn["type"] == "fixation").sum()
    assert m.f1 > 0.8  # two experts mostly agree on fixation onsets
    assert abs(m.onset_diff_mean_ms) < 20

    web = pd.DataFrame({"type": ["fixation"] * 4, "onset_s": [0.0, 1.0, 2.0, 3.0],
                        "offset_s": [0.5, 1.5, 2.5, 3.5]})
    ref = pd.DataFrame({"type": ["fixation"] * 3 + ["saccade"], "onset_s": [1.03, 2.2, 3.02, 2.9],
                        "offset_s": [1.5, 2.5, 3.5, 3.0]})
    # reference clock is 1 s behind: ref time + 1 = clip time... here offset 0 except the first
    r = match_events(web, ref, tolerance_s=0.1)
    assert (r.n_webcam, r.n_reference, r.n_matched) == (3, 3, 2)  # the webcam fixation at 0 s precedes the reference
    assert r.precision == pytest.approx(2 / 3) and r.recall == pytest.approx(2 / 3)
    assert r.f1 == pytest.approx(2 / 3)
    assert r.onset_diff_mean_ms == pytest.approx(-25.0)
    r2 = match_events(web, ref.assign(onset_s=ref["onset_s"] - 1.0, offset_s=ref["offset_s"] - 1.0), offset_s=1.0)
    assert r2.n_matched == 2
    one_to_one = match_events(web, pd.DataFrame({"type": ["fixation"] * 2, "onset_s": [1.01, 1.02],
                                                 "offset_s": [1.4, 1.5]}))
    assert one_to_one.n_matched == 1


def test_helpers_and_degenerate_cases():
    assert cohen_kappa(np.array(["a", "b", "a", "b"]), np.array(["a", "b", "a", "b"]))[0] == pytest.approx(1.0)
    # two categories: po = 0.8, pe = 0.5 -> kappa 0.6 (Cohen 1960 definition, computed by hand)
    a = np.array([1] * 5 + [0] * 5, bool)
    b = np.array([1, 1, 1, 1, 0, 0, 0, 0, 0, 1], bool)
    assert cohen_kappa(a, b)[0] == pytest.approx((0.8 - 0.5) / 0.5)
    out = labels_at([0.0, 0.49, 0.51, 5.0], [0.0, 0.5, 1.0], np.array(["x", "y", "z"], object), max_gap_s=0.2)
    assert out.tolist() == ["x", "y", "y", ""]
    t = np.arange(10) / 30
    with pytest.warns(AgreementWarning, match="overlap"):
        k = label_kappa(t, np.full(10, "fixation", object), t + 100, np.full(10, "fixation", object))
    assert np.isnan(k.kappa)
    with pytest.warns(AgreementWarning, match="same"):
        k = label_kappa(t, np.full(10, "fixation", object), t, np.full(10, "fixation", object))
    assert np.isnan(k.kappa)
    empty = pd.DataFrame({"type": pd.Series(dtype=str), "onset_s": pd.Series(dtype=float),
                          "offset_s": pd.Series(dtype=float)})
    m = match_events(empty, empty)
    assert m.n_matched == 0 and np.isnan(m.f1)
