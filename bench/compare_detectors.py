"""Compare the detectors on the hand-coded recordings of Andersson et al. (2017).

Conditions: each trial at its own rate (500 / 200 Hz), and downsampled to
30 Hz (sample nearest each 1/30 s tick) with seeded Gaussian noise of 0.5 and
1.0 deg RMS (per-axis SD = RMS / sqrt(2)), optionally with a gain error and a
constant offset (webcam-like). Figures per detector x condition:

* kappa_MN, kappa_RA - mean over trials of sample-level Cohen's kappa
  (fixation vs not) against each coder;
* count_err - median over trials of (detected count / coders' mean count - 1);
* dur_err - median over trials of the same for the mean fixation duration;
* count_r - Pearson correlation of per-trial counts with the coders' mean.

Coders' counts and durations are taken at the recording's own rate.

Run: ``python bench/compare_detectors.py [--trials-dir DIR] [--param name=value ...]``

What it printed for the defaults of aspectus 0.1.0 (seed 0; I-VT with its
default Engbert & Kliegl threshold), which chose I-DT as the default detector:

==========  =====================  ========  ========  =========  =======  =======
detector    condition              kappa_MN  kappa_RA  count_err  dur_err  count_r
==========  =====================  ========  ========  =========  =======  =======
idt         native                 0.823     0.786     -0.1 %     +0.6 %   0.805
idt         30Hz_0.5deg            0.628     0.605     +0.7 %     -5.3 %   0.870
idt         30Hz_1.0deg            0.598     0.561     -4.9 %     +6.3 %   0.833
idt         30Hz_1.0deg_gain1.25   0.598     0.561     -4.9 %     +6.3 %   0.833
idt         15Hz_1.0deg            0.432     0.438     -19.7 %    +16.1 %  0.441
idt         60Hz_2.0deg            0.447     0.411     +4.2 %     +10.9 %  0.799
i2mc        native                 0.798     0.765     -1.6 %     +3.2 %   0.835
i2mc        30Hz_0.5deg            0.608     0.579     -16.5 %    +14.9 %  0.733
i2mc        30Hz_1.0deg            0.571     0.542     -28.0 %    +38.5 %  0.441
i2mc        15Hz_1.0deg            0.184     0.168     -92.5 %    +1557 %  -0.319
i2mc        60Hz_2.0deg            0.508     0.445     -31.3 %    +67.8 %  0.779
ivt         native                 0.832     0.792     -4.5 %     +5.0 %   0.912
ivt         30Hz_0.5deg            0.618     0.593     -36.3 %    +57.1 %  0.553
ivt         30Hz_1.0deg            0.567     0.542     -48.8 %    +110.7 % 0.719
ivt         15Hz_1.0deg            0.416     0.402     -59.5 %    +138.7 % -0.049
ivt         60Hz_2.0deg            0.312     0.272     -68.7 %    +285.0 % -0.063
==========  =====================  ========  ========  =========  =======  =======

With the merge test of two means (``merge_alpha = 0.05``, the default since;
``--param merge_alpha=0`` gives the table above) I-DT printed:

==========  =====================  ========  ========  =========  =======  =======
detector    condition              kappa_MN  kappa_RA  count_err  dur_err  count_r
==========  =====================  ========  ========  =========  =======  =======
idt         native                 0.823     0.786     -0.1 %     +0.6 %   0.805
idt         30Hz_0.5deg            0.634     0.610     -1.8 %     -2.6 %   0.888
idt         30Hz_1.0deg            0.601     0.564     -9.9 %     +11.2 %  0.874
idt         30Hz_1.0deg_gain1.25   0.601     0.564     -9.9 %     +11.2 %  0.874
idt         15Hz_1.0deg            0.432     0.438     -25.3 %    +20.6 %  0.468
idt         60Hz_2.0deg            0.462     0.420     -4.8 %     +27.3 %  0.825
==========  =====================  ========  ========  =========  =======  =======

(I2MC and I-VT moved by at most 0.03 in count_r and 0.004 in kappa.)
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

from _lund import CODERS, cohen_kappa, degrade, load_all, runs  # noqa: E402

from aspectus.events.analysis import AnalysisParams, run_analysis  # noqa: E402

CONDITIONS = {
    "native": None,
    "250Hz_0.1deg": dict(rate_hz=250.0, noise_rms_deg=0.1),
    "120Hz_0.1deg": dict(rate_hz=120.0, noise_rms_deg=0.1),
    "60Hz_0.3deg": dict(rate_hz=60.0, noise_rms_deg=0.3),
    "60Hz_0.5deg": dict(rate_hz=60.0, noise_rms_deg=0.5),
    "30Hz_0.1deg": dict(rate_hz=30.0, noise_rms_deg=0.1),
    "30Hz_0.3deg": dict(rate_hz=30.0, noise_rms_deg=0.3),
    "30Hz_0.5deg": dict(rate_hz=30.0, noise_rms_deg=0.5),
    "30Hz_1.0deg": dict(rate_hz=30.0, noise_rms_deg=1.0),
    "30Hz_1.0deg_gain1.25": dict(rate_hz=30.0, noise_rms_deg=1.0, gain=1.25, offset_deg=5.0),
    "15Hz_1.0deg": dict(rate_hz=15.0, noise_rms_deg=1.0),
    "60Hz_2.0deg": dict(rate_hz=60.0, noise_rms_deg=2.0),
}


def evaluate(trials, params: AnalysisParams, condition: dict | None, seed: int = 0) -> dict:
    kap = {c: [] for c in CODERS}
    det_n, det_d, ref_n, ref_d = [], [], [], []
    for k, tr in enumerate(trials):
        ref = [runs(tr.fixation_mask(c), tr.t_s) for c in CODERS]
        ref_n.append(np.mean([r[0] for r in ref]))
        ref_d.append(np.mean([r[1] for r in ref]))
        if condition is not None:
            cond = dict(condition)
            gain = cond.pop("gain", 1.0)
            off = cond.pop("offset_deg", 0.0)
            tr = degrade(tr, seed=seed + k, **cond)
            tr.yaw_deg = tr.yaw_deg * gain + off
            tr.pitch_deg = tr.pitch_deg * gain - off
        res = run_analysis(tr.samples(), params)
        fix = res.labels == "fixation"
        for c in CODERS:
            kap[c].append(cohen_kappa(fix, tr.fixation_mask(c)))
        ev = res.events[res.events["type"] == "fixation"]
        det_n.append(len(ev))
        det_d.append(ev["duration_ms"].mean() if len(ev) else np.nan)
    det_n, det_d, ref_n, ref_d = map(np.asarray, (det_n, det_d, ref_n, ref_d))
    return {
        "kappa_MN": float(np.mean(kap["MN"])), "kappa_RA": float(np.mean(kap["RA"])),
        "count_err": float(np.median(det_n / ref_n - 1)), "dur_err": float(np.median(det_d / ref_d - 1)),
        "count_r": float(np.corrcoef(det_n, ref_n)[0, 1]),
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials-dir", default=str(REPO.parent / "shared" / "reference" / "lund2013" / "img"))
    ap.add_argument("--detectors", nargs="*", default=["i2mc", "idt", "ivt"])
    ap.add_argument("--conditions", nargs="*", default=list(CONDITIONS))
    ap.add_argument("--param", action="append", default=[], help="name=value, applied to every detector")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    trials = load_all(Path(args.trials_dir))
    extra = {}
    for p in args.param:
        k, v = p.split("=", 1)
        extra[k] = eval(v, {}, {})  # bench-only convenience: numbers, tuples, None
    print(f"{'detector':<10}{'condition':<24}{'kappa_MN':>9}{'kappa_RA':>9}{'count_err':>10}{'dur_err':>9}{'count_r':>9}")
    for det in args.detectors:
        params = AnalysisParams.from_dict({**AnalysisParams().to_dict(), **extra, "detector": det})
        for name in args.conditions:
            r = evaluate(trials, params, CONDITIONS[name], seed=args.seed)
            print(f"{det:<10}{name:<24}{r['kappa_MN']:>9.3f}{r['kappa_RA']:>9.3f}{r['count_err']:>+10.1%}"
                  f"{r['dur_err']:>+9.1%}{r['count_r']:>9.3f}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
