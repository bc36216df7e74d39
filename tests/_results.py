"""Clip result folders made without the face mesh: constructed gaze, the real analysis and writers.

A folder holds what ``aspectus process`` writes (samples.parquet/.csv, events,
features, run.json with checksums), from a constructed gaze signal
(``tests/_signals.py``) with blinks, a stretch of lost data and, on request,
a variable frame rate - so export and reading tests run in a fraction of a
second per clip.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from _signals import PLAN, step_signal


def constructed_samples(*, seed: int = 0, vfr: bool = False, rate_hz: float = 30.0) -> pd.DataFrame:
    """A webcam-like samples table: 4 repeats of the step plan, one blink, one 0.4 s loss; VFR on request."""
    plan = PLAN * 4
    s, _ = step_signal(rate_hz=rate_hz, noise_sd_deg=0.05, seed=seed, plan=plan)
    n = len(s)
    rng = np.random.default_rng(seed + 100)
    if vfr:  # intervals drawn between 25 and 45 ms, as a phone's variable-rate recording has
        s["t_s"] = np.concatenate([[0.0], np.cumsum(rng.uniform(0.025, 0.045, n - 1))])
    blink = np.zeros(n, bool)
    blink[40:46] = True
    lost = np.zeros(n, bool)
    lost[150:162] = True
    valid = ~blink & ~lost
    s["valid"] = valid
    s.loc[~valid, ["yaw_deg", "pitch_deg"]] = np.nan
    s["blink"] = blink
    s["frame_index"] = np.arange(n, dtype=np.int64)
    s["pts_s"] = s["t_s"] + 12.5
    s["face_found"] = ~lost
    s["face_count"] = (~lost).astype(np.int64)
    for eye, d in (("left", 0.4), ("right", -0.4)):
        s[f"{eye}_yaw_deg"] = s["yaw_deg"] + d
        s[f"{eye}_pitch_deg"] = s["pitch_deg"]
    s["head_yaw_deg"] = 2.0 * np.sin(np.arange(n) / 50.0)
    s["head_pitch_deg"] = -1.0
    s["head_roll_deg"] = 0.5
    s["distance_mm"] = 620.0 + rng.normal(0, 2, n)
    s["aperture_rel"] = np.where(blink, 0.3, 1.0)
    s["pupil"] = np.nan
    return s


def write_clip_results(out_dir, samples: pd.DataFrame, *, clip_name: str = "clip.mp4") -> Path:
    """Write a clip result folder the way the pipeline does (its own writers), run.json last."""
    from aspectus.atomic import write_json
    from aspectus.events.analysis import AnalysisParams, run_analysis
    from aspectus.webcam.pipeline import ProcessParams, _write_outputs

    out_dir = Path(out_dir)
    params = ProcessParams()
    analysis = run_analysis(samples, AnalysisParams())
    run = {"aspectus": "test", "clip": clip_name, "clip_name": clip_name, "input_sha256": "0" * 64,
           "params": params.to_dict(), "params_sha256": params.fingerprint(),
           "software": {"aspectus": "test", "numpy": np.__version__}, "quality": {}}
    run["outputs"] = _write_outputs(out_dir, samples, analysis, run)
    write_json(out_dir / "run.json", run)
    return out_dir


def write_batch_folder(root, clips: dict[str, dict]) -> Path:
    """A batch output folder: clip folders plus the status.csv ``aspectus batch`` writes.

    ``clips`` maps a clip key to ``{"participant": ..., "session": ..., "status": "done", <labels>,
    "vfr": bool, "seed": int}``; clips whose status is not done/skipped get no result folder.
    """
    from aspectus.studies.batch import STATUS_COLUMNS, STATUS_TAIL_COLUMNS

    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    extra = sorted({k for c in clips.values() for k in c} - {"participant", "session", "status", "vfr", "seed"})
    rows = []
    for key, c in clips.items():
        status = c.get("status", "done")
        if status in ("done", "skipped"):
            write_clip_results(root / key, constructed_samples(seed=c.get("seed", 0), vfr=c.get("vfr", False)),
                               clip_name=f"{key}.mp4")
        rec = {k: None for k in (*STATUS_COLUMNS, *extra, *STATUS_TAIL_COLUMNS)}
        rec.update({"clip": f"{key}.mp4", "key": key, "status": status,
                    "reason": "" if status == "done" else "the clip could not be read",
                    "participant": c.get("participant"), "session": c.get("session"), "out_dir": key})
        rec.update({k: c.get(k) for k in extra})
        rows.append(rec)
    pd.DataFrame(rows, columns=[*STATUS_COLUMNS, *extra, *STATUS_TAIL_COLUMNS]).to_csv(root / "status.csv",
                                                                                       index=False)
    (root / "study.json").write_text(json.dumps({"software": "aspectus"}))
    return root
