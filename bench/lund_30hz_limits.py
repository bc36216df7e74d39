"""What part of the 30 Hz disagreement with the Lund coders a detector could recover (prints figures).

The hand-coded recordings of Andersson et al. (2017) (../shared/reference/lund2013), downsampled to 30 Hz with
Gaussian noise (tests/_lund.degrade; seed = trial index, as in tests/events/test_lund_detect.py). The coders
label saccades and post-saccadic oscillations (PSO) as not fixation; at 30 Hz a saccade holds 0-2 samples and
the PSO lies within the position noise. Per noise level, means over the 8 trials against each coder (MN / RA):

* kappa of the default detector;
* kappa of a labelling that knows the coders' saccades but not their PSO (tests/_lund.saccade_known_kappa);
* kappa of a position rule told the true fixation centres (tests/_lund.position_oracle_kappa), best over
  z = 0.5-6 noise SDs: what position can show at this noise, with perfect knowledge of where fixations are;
* the coders against each other at 30 Hz;
* the detector's mean fixation duration minus the coders' mean (at their own rate), and a budget of it: the
  coders' PSO samples and saccade samples the detector labels fixation, in ms per coder fixation (saccade
  samples split into those the position rule at z = 1.645 finds and those it cannot), and what the 3-sample
  rule (postprocess.MIN_FIXATION_SAMPLES) adds (the duration with 2 minus with 3);
* the PSO-implied bias at the native rate (tests/_lund.pso_duration_bias_ms).

Run: ``python bench/lund_30hz_limits.py [--trials-dir DIR] [--noise 0.1 0.3 0.5]``
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

import _lund  # noqa: E402
from _lund import CODERS, PSO, SACCADE, cohen_kappa, degrade, load_all, runs  # noqa: E402

import aspectus.events.detect.postprocess as pp  # noqa: E402
from aspectus.events.analysis import AnalysisParams, run_analysis  # noqa: E402

ZS = (0.5, 1.0, 1.645, 2.0, 2.5, 3.0, 4.0, 6.0)


def measure(trials, noise: float) -> dict:
    out = {c: {"det": [], "sacc": [], "pos": {z: [] for z in ZS}, "cc": [], "pso_ms": [], "sac_far_ms": [],
               "sac_near_ms": []} for c in CODERS}
    d_err, d_min2 = [], []
    for k, tr in enumerate(trials):
        lo = degrade(tr, rate_hz=30.0, noise_rms_deg=noise, seed=k)
        ref_d = np.mean([runs(tr.fixation_mask(c), tr.t_s)[1] for c in CODERS])
        res = run_analysis(lo.samples(), AnalysisParams())
        fx = res.events[res.events.type == "fixation"]
        d_err.append(fx.duration_ms.mean() - ref_d)
        keep = pp.MIN_FIXATION_SAMPLES
        try:
            pp.MIN_FIXATION_SAMPLES = 2
            r2 = run_analysis(lo.samples(), AnalysisParams())
        finally:
            pp.MIN_FIXATION_SAMPLES = keep
        d_min2.append(r2.events[r2.events.type == "fixation"].duration_ms.mean() - ref_d)
        fix = res.labels == "fixation"
        dt_ms = 1000.0 / 30.0
        sd = noise / np.sqrt(2.0)
        for c in CODERS:
            o = out[c]
            lab = lo.labels[c]
            n_fix = runs(tr.fixation_mask(c), tr.t_s)[0]
            o["det"].append(cohen_kappa(fix, lab == _lund.FIXATION))
            o["sacc"].append(_lund.saccade_known_kappa(lo, c))
            for z in ZS:
                o["pos"][z].append(_lund.position_oracle_kappa(tr, lo, c, z=z, noise_sd_deg=sd)[0])
            o["cc"].append(cohen_kappa(lab == _lund.FIXATION, lo.fixation_mask([x for x in CODERS if x != c][0])))
            # which saccade samples the position rule (z = 1.645) finds: rerun it, marking them
            far = _far_saccade_samples(tr, lo, c, 1.645, sd)
            o["pso_ms"].append((fix & (lab == PSO)).sum() * dt_ms / n_fix)
            o["sac_far_ms"].append((fix & (lab == SACCADE) & far).sum() * dt_ms / n_fix)
            o["sac_near_ms"].append((fix & (lab == SACCADE) & ~far).sum() * dt_ms / n_fix)
    return {"coders": out, "dur_err_ms": float(np.mean(d_err)), "min_rule_ms": float(np.mean(d_err) - np.mean(d_min2)),
            "pso_native_ms": {c: float(np.mean([_lund.pso_duration_bias_ms(tr, c) for tr in trials])) for c in CODERS}}


def _far_saccade_samples(tr, lo, coder, z, sd):
    """Saccade samples of ``lo`` the position rule labels not-fixation (one at a time, by masking the rest)."""
    lab = lo.labels[coder]
    far = np.zeros(len(lab), bool)
    for i in np.flatnonzero(lab == SACCADE):
        probe = _lund.LundTrial(name=lo.name, t_s=lo.t_s[i:i + 1], yaw_deg=lo.yaw_deg[i:i + 1],
                                pitch_deg=lo.pitch_deg[i:i + 1], valid=lo.valid[i:i + 1],
                                labels={coder: lab[i:i + 1]}, screen=lo.screen)
        far[i] = _lund.position_oracle_kappa(tr, probe, coder, z=z, noise_sd_deg=sd)[1] == 1
    return far


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials-dir", default=str(REPO.parent / "shared" / "reference" / "lund2013" / "img"))
    ap.add_argument("--noise", nargs="*", type=float, default=[0.1, 0.3, 0.5])
    args = ap.parse_args(argv)
    trials = load_all(Path(args.trials_dir))
    for noise in args.noise:
        m = measure(trials, noise)
        print(f"30 Hz, {noise:.1f} deg RMS noise")
        for c in CODERS:
            o = m["coders"][c]
            best = max(ZS, key=lambda z: np.mean(o["pos"][z]))
            print(f"  {c}: kappa detector {np.mean(o['det']):.3f} | saccades known, PSO not {np.mean(o['sacc']):.3f}"
                  f" | position rule with true centres {np.mean(o['pos'][best]):.3f} (z {best:g})"
                  f" | other coder {np.mean(o['cc']):.3f}")
            print(f"      ms per coder fixation labelled fixation by the detector: PSO {np.mean(o['pso_ms']):.1f},"
                  f" saccade samples position cannot show {np.mean(o['sac_near_ms']):.1f},"
                  f" saccade samples it can {np.mean(o['sac_far_ms']):.1f};"
                  f" PSO-implied bias at the native rate {m['pso_native_ms'][c]:+.1f} ms")
        print(f"  mean fixation duration minus the coders': {m['dur_err_ms']:+.1f} ms,"
              f" of which the 3-sample rule {m['min_rule_ms']:+.1f} ms", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
