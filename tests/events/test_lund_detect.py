"""The default detector against two expert coders (Andersson et al. 2017 recordings).

Source of the reference labels: Andersson, Larsson, Holmqvist, Stridh &
Nystrom (2017), Behavior Research Methods 49(2) - the files in
../shared/reference/lund2013 (README there). Floors from aspectus's issue 3.

Definitions used here:
* kappa: Cohen's kappa of fixation-vs-not per sample, one value per trial,
  averaged over the 8 trials, separately against coder MN and coder RA.
* 30 Hz: the sample nearest each 1/30 s tick, with the coder's label of that
  sample; noise "X deg RMS": Gaussian on yaw and pitch with per-axis SD
  X / sqrt(2), so the RMS length of the 2-D noise vector is X deg (seeded).
* count / duration error: detected per-trial fixation count (mean fixation
  duration) over the two coders' mean at the recording's own rate, minus 1;
  the floor applies to the median trial.
* count correlation: Pearson r over the 8 trials between the coders' mean
  count and the detected count averaged over 5 noise seeds (a single noise
  draw moves a trial's count by +-2, the same size as the spread between
  trials, 27-35).
"""
from __future__ import annotations

import numpy as np
import pytest
import _lund
from _lund import CODERS, cohen_kappa, degrade, load_all, runs

from aspectus.events.analysis import AnalysisParams, run_analysis

SEEDS = (0, 1, 2, 3, 4)


@pytest.fixture(scope="module")
def trials(lund_dir):
    return load_all(lund_dir)


def _coders(tr):
    r = [runs(tr.fixation_mask(c), tr.t_s) for c in CODERS]
    return np.mean([x[0] for x in r]), np.mean([x[1] for x in r])


def _detect(tr, params=None):
    res = run_analysis(tr.samples(), params or AnalysisParams())
    fx = res.events[res.events.type == "fixation"]
    return res, len(fx), float(fx["duration_ms"].mean())


def test_coders_agree_as_the_readme_says(trials):
    # README: coder-vs-coder kappa mean 0.86, range 0.74-0.93; 8 trials; counts 27-35
    assert len(trials) == 8
    k = [cohen_kappa(tr.fixation_mask("MN"), tr.fixation_mask("RA")) for tr in trials]
    assert np.mean(k) == pytest.approx(0.86, abs=0.01)
    assert min(k) == pytest.approx(0.74, abs=0.01) and max(k) == pytest.approx(0.93, abs=0.01)
    counts = [runs(tr.fixation_mask(c), tr.t_s)[0] for tr in trials for c in CODERS]
    # README: "from 27 to 35"; counting runs of label 1 here gives 27-34 (the README's count may split or
    # join runs differently), so the check allows one either way
    assert 26 <= min(counts) <= 28 and 34 <= max(counts) <= 36
    durs = [runs(tr.fixation_mask(c), tr.t_s)[1] for tr in trials for c in CODERS]
    # README: "about 110 ms to 320 ms". From the timestamps the shortest mean is 188 ms (UH47, RA); the
    # README's 110 ms matches UH47 timed at its nominal 500 Hz (283 ms x 200/500 = 113 ms), which the README
    # itself warns against. The top end agrees.
    assert 180 <= min(durs) <= 200 and 300 <= max(durs) <= 330
    rates = sorted(round(tr.rate_hz) for tr in trials)
    assert rates == [200] + [500] * 7  # UH47 is really 200 Hz (README)


def test_native_rate_kappa_against_each_coder(trials):
    kap = {c: [] for c in CODERS}
    for tr in trials:
        res, _, _ = _detect(tr)
        fix = res.labels == "fixation"
        for c in CODERS:
            kap[c].append(cohen_kappa(fix, tr.fixation_mask(c)))
    # floor of aspectus's issue 22: 0.80 against each coder (measured 0.832 / 0.803; the coders agree at 0.86)
    assert np.mean(kap["MN"]) >= 0.80, kap
    assert np.mean(kap["RA"]) >= 0.80, kap


@pytest.mark.parametrize("rate_hz, noise, dur_ms, count_frac", [
    # at rates where speed is measured (>= 100 Hz) both edges are found as the coders find them: the floors
    (250.0, 0.1, 10.0, 0.10), (120.0, 0.1, 10.0, 0.10),
    # at webcam rates fixations come out longer than the coders': measured +19.9 ms at 60 Hz / 0.1 deg and +29.2,
    # +21.3 and +37.0 ms at 30 Hz / 0.1, 0.3, 0.5 deg. Issue 16's +-10 % and issue 22's +-10 ms are NOT met at
    # 30-60 Hz on these recordings, and at 30 Hz cannot be by a detector unbiased on eye movements without
    # post-saccadic oscillations (PSO): the coders' PSO alone makes +13 to +17 ms, and saccade samples that lie
    # within the noise of a fixation centre another 14 ms at 0.5 deg (test_30hz_half_degree_noise_limits_of_what_
    # position_can_show, docs/notes/lund-30hz-limits.md). The rule that a fixation holds at least 3 samples
    # (postprocess.MIN_FIXATION_SAMPLES) adds some 9 ms at 30 Hz by dropping the coders' shortest fixations; it
    # keeps the demo clips' fixation counts near their rendered truth (74 / 78 and 34 / 39; 82 and 45 without).
    # Trimming by speed at these rates (edge_speed_low_rates) gives -18 to +0 ms here but -64 to -73 ms on the
    # synthetic scan paths. Bounds: measured + 5 ms.
    (60.0, 0.1, 25.0, 0.10), (30.0, 0.1, 35.0, 0.10), (30.0, 0.3, 27.0, 0.10), (30.0, 0.5, 42.0, 0.10),
])
def test_downsampled_counts_and_durations_against_the_coders(trials, rate_hz, noise, dur_ms, count_frac):
    d_err, c_err = [], []
    for k, tr in enumerate(trials):
        ref_n, ref_d = _coders(tr)
        _, n, d = _detect(degrade(tr, rate_hz=rate_hz, noise_rms_deg=noise, seed=k))
        d_err.append(d - ref_d)
        c_err.append(n / ref_n - 1)
    assert abs(np.mean(c_err)) <= count_frac, c_err
    assert abs(np.mean(d_err)) <= dur_ms, d_err


def _degraded_run(trials, noise, seeds, gain=1.0, offset_deg=0.0):
    out = []
    for k, tr in enumerate(trials):
        ref_n, ref_d = _coders(tr)
        per_seed = []
        for s in seeds:
            lo = degrade(tr, rate_hz=30.0, noise_rms_deg=noise, seed=1000 * s + k)
            lo.yaw_deg = lo.yaw_deg * gain + offset_deg
            lo.pitch_deg = lo.pitch_deg * gain - offset_deg
            res, n, d = _detect(lo)
            fix = res.labels == "fixation"
            per_seed.append((n, d, cohen_kappa(fix, lo.fixation_mask("MN")), cohen_kappa(fix, lo.fixation_mask("RA")),
                             res.quality["detector_thresholds"]["dispersion_deg"]))
        out.append((ref_n, ref_d, np.array(per_seed)))
    return out


def test_30hz_half_degree_noise(trials):
    runs_ = _degraded_run(trials, 0.5, SEEDS)
    ref_n = np.array([r[0] for r in runs_])
    ref_d = np.array([r[1] for r in runs_])
    first = np.array([r[2][0] for r in runs_])  # seed 0 alone
    count_err = np.median(first[:, 0] / ref_n - 1)
    dur_err = np.median(first[:, 1] / ref_d - 1)
    assert abs(count_err) <= 0.20, count_err
    assert abs(dur_err) <= 0.20, dur_err
    # sample kappa fell from 0.63 / 0.61 to 0.51 / 0.48 (measured 0.507 / 0.481) when the trimming by speed stopped
    # removing genuine fixation samples at 30 Hz (it removed the sample beside every saccade, which the coders often
    # label as saccade or post-saccadic oscillation - and so shortened every fixation by 64-73 ms on synthetic scan
    # paths). Issue 16's floor of 0.62 is NOT met; a position rule told the true fixation centres reaches at most
    # 0.489 / 0.514 here (test_30hz_half_degree_noise_limits_of_what_position_can_show below).
    assert first[:, 2].mean() >= 0.48 and first[:, 3].mean() >= 0.45, first[:, 2:4]
    mean_counts = np.array([r[2][:, 0].mean() for r in runs_])
    r = np.corrcoef(mean_counts, ref_n)[0, 1]
    assert r >= 0.85, (r, mean_counts, ref_n)


def test_30hz_one_degree_noise_thresholds_adapt(trials):
    half = _degraded_run(trials, 0.5, (0,))
    one = _degraded_run(trials, 1.0, (0,))
    ref_n = np.array([r[0] for r in one])
    n1 = np.array([r[2][0, 0] for r in one])
    assert abs(np.median(n1 / ref_n - 1)) <= 0.30
    # the dispersion threshold follows the noise: about twice as high at 1.0 deg as at 0.5 deg
    th_half = np.array([r[2][0, 4] for r in half])
    th_one = np.array([r[2][0, 4] for r in one])
    assert np.all(th_one / th_half == pytest.approx(2.0, rel=0.2))


@pytest.mark.parametrize("gain", [0.75, 1.25])
def test_webcam_gain_and_offset(trials, gain):
    # uncalibrated webcam angles: +-25 % gain and a constant offset (field notes); 1.0 deg noise
    out = _degraded_run(trials, 1.0, (0,), gain=gain, offset_deg=6.0)
    ref_n = np.array([r[0] for r in out])
    n = np.array([r[2][0, 0] for r in out])
    assert abs(np.median(n / ref_n - 1)) <= 0.30


def test_30hz_half_degree_noise_limits_of_what_position_can_show(trials):
    """The kappa floor of issue 16 at 30 Hz / 0.5 deg (0.62) and its +-10 ms duration floor on these recordings
    lie beyond what the samples can show (bench/lund_30hz_limits.py prints the full budget).

    * A labelling that knows the coders' saccades but not their post-saccadic oscillations (PSO) reaches
      kappa 0.801 / 0.804 (MN / RA): missing the PSO alone costs 0.05 against the coders' 0.856 agreement.
    * Knowing the saccades at 30 Hz is the hard part: a position rule told the coders' true fixation centres,
      labelling a saccade sample or a fixation sample beside a saccade as not-fixation when it lies between the
      two centres and more than z noise SDs from both, reaches at most 0.489 / 0.514 (best z 1.645 of 0.5-6):
      most saccade samples at 30 Hz lie within the noise of a centre (the slow start and end of the movement,
      as the coders draw it). The default detector reaches 0.507 / 0.481, at that limit. Issue 16's 0.62 is NOT
      met and cannot be by position; only labelling the sample beside every saccade not-fixation whatever its
      position came near it (0.63 / 0.61 before), which shortens every fixation by 50-70 ms on scan paths
      without oscillations (edge_speed_low_rates; bench/scan_path_rates.py).
    * Durations: counting the coders' PSO as fixation lengthens their mean fixation by +16.6 / +13.4 ms at the
      native rate, beyond the +-10 ms floor by itself. At 30 Hz / 0.5 deg the detector's +37.0 ms splits into
      PSO samples (13.1 / 14.0 ms per coder fixation), saccade samples position cannot show (13.7 / 13.9 ms),
      saccade samples it could (2.3 / 1.4 ms) and the 3-sample rule (+9.2 ms; kept for the demo clips, whose
      rendered truth it matches).
    """
    sd = 0.5 / np.sqrt(2.0)
    zs = (0.5, 1.0, 1.645, 2.0, 2.5, 3.0, 4.0, 6.0)
    det = {c: [] for c in CODERS}
    known = {c: [] for c in CODERS}
    pos = {c: {z: [] for z in zs} for c in CODERS}
    for k, tr in enumerate(trials):
        lo = degrade(tr, rate_hz=30.0, noise_rms_deg=0.5, seed=k)
        res, _, _ = _detect(lo)
        fix = res.labels == "fixation"
        for c in CODERS:
            det[c].append(cohen_kappa(fix, lo.fixation_mask(c)))
            known[c].append(_lund.saccade_known_kappa(lo, c))
            for z in zs:
                pos[c][z].append(_lund.position_oracle_kappa(tr, lo, c, z=z, noise_sd_deg=sd)[0])
    for c in CODERS:
        best = max(np.mean(v) for v in pos[c].values())
        assert np.mean(known[c]) >= 0.78, (c, np.mean(known[c]))  # measured 0.801 / 0.804
        assert best < 0.56, (c, best)  # measured 0.489 / 0.514: below issue 16's 0.62
        assert np.mean(det[c]) >= best - 0.05, (c, np.mean(det[c]), best)  # measured 0.507 / 0.481
        pso = np.mean([_lund.pso_duration_bias_ms(tr, c) for tr in trials])
        assert pso >= 12.0, (c, pso)  # measured +16.6 / +13.4 ms: beyond +-10 ms by itself
