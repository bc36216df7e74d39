"""Rendered test clips of a student watching the known-target sequence.

:func:`schedule_trajectory` turns a target schedule
(:mod:`aspectus.targets.schedule`) into a gaze :class:`Trajectory` whose
eyes follow the dots: a still dot is reached by a main-sequence saccade
``latency_s`` after it appears, a moving dot is followed with the same lag,
and the gaze angle is ``offset_deg + gain * target_deg`` per axis (the
per-person offset and gain that the known-target check fits), plus
fixational drift. :func:`render_target_clip` renders it with
:func:`aspectus.synth.render.render_clip` and then brightens the frames
that fall in the schedule's flash, as the light of a white screen does on a
face, and writes ``<stem>_targets.json`` with the truth of the sequence
(the flash's first frame and time in the clip, the gain and offset used).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.errors import ParameterError
from aspectus.synth.trajectory import Trajectory, _min_jerk, _ou_noise, saccade_duration_ms

__all__ = ["schedule_trajectory", "render_target_clip", "FLASH_GAIN", "FLASH_LIFT"]

#: how the flash changes the picture: grey level * FLASH_GAIN + FLASH_LIFT (a white screen lighting the face)
FLASH_GAIN = 1.3
FLASH_LIFT = 12.0


def schedule_trajectory(schedule, *, lead_in_s: float = 2.0, tail_s: float = 1.0, offset_deg=(0.0, 0.0),
                        gain=(1.0, 1.0), latency_s: float = 0.2, drift_sd_deg: float = 0.05,
                        rate_hz: float = 240.0, head_motion=False, head_distance_mm: float | None = None,
                        seed: int = 0) -> Trajectory:
    """A gaze trajectory that follows ``schedule``, with the flash at ``lead_in_s`` on the trajectory's clock.

    Parameters
    ----------
    schedule : aspectus.targets.schedule.Schedule
    lead_in_s : float, default 2
        Time before the flash, s (the student looks at the screen's centre).
    tail_s : float, default 1
        Time after the sequence's end, s.
    offset_deg : (float, float), default (0, 0)
        Gaze yaw and pitch, deg, while the eyes are on the screen's centre.
    gain : (float, float), default (1, 1)
        Measured gaze angle per degree of target angle, yaw and pitch.
    latency_s : float, default 0.2
        Delay of the eyes behind the dot, s (saccade latency; the same lag in pursuit).
    drift_sd_deg : float, default 0.05
        Fixational drift SD per axis, deg.
    rate_hz : float, default 240
    head_motion : bool or dict, default False
        As in :func:`aspectus.synth.trajectory.synth_trajectory`.
    head_distance_mm : float, optional
        Head distance from the camera; default the schedule's viewing distance.
    seed : int, default 0

    Returns
    -------
    Trajectory
        ``params["target_sequence"]`` holds ``flash_onset_s`` (trajectory
        time of schedule time 0) and the arguments.
    """
    from aspectus.synth.trajectory import HEAD_MOTION_DEFAULTS, _head_track

    for name, v, lo, hi in (("lead_in_s", lead_in_s, 0.0, 60.0), ("tail_s", tail_s, 0.0, 60.0),
                            ("latency_s", latency_s, 0.0, 1.0), ("drift_sd_deg", drift_sd_deg, 0.0, 2.0),
                            ("rate_hz", rate_hz, 30.0, 2000.0)):
        if not (np.isfinite(v) and lo <= v <= hi):
            raise ParameterError(f"{name} must be between {lo:g} and {hi:g}, got {v!r}")
    gx, gy = (float(v) for v in gain)
    ox, oy = (float(v) for v in offset_deg)
    dist = float(head_distance_mm if head_distance_mm is not None else schedule.screen.viewing_distance_mm)
    duration = lead_in_s + schedule.duration_s + tail_s
    n = int(np.floor(duration * rate_hz)) + 1
    t = np.arange(n) / rate_hz
    ts = t - lead_in_s - latency_s  # schedule time the eyes act on
    x, y, idx = schedule.position_deg(ts)
    # between targets (and before the first) the eyes stay where they were; before the first: the centre
    x = pd.Series(x).ffill().fillna(0.0).to_numpy()
    y = pd.Series(y).ffill().fillna(0.0).to_numpy()
    # steps of the dot become main-sequence saccades with a minimum-jerk profile
    step = np.hypot(np.diff(x), np.diff(y))
    jumps = np.flatnonzero(step > 0.5) + 1
    ex, ey = x.copy(), y.copy()
    fix_rows, sac_rows = [], []
    for j in jumps:
        x0, y0, x1, y1 = x[j - 1], y[j - 1], x[j], y[j]
        amp = float(np.hypot(x1 - x0, y1 - y0))
        sdur = float(saccade_duration_ms(amp)) / 1000.0
        sel = slice(j, min(n, j + int(np.ceil(sdur * rate_hz))))
        s = _min_jerk((t[sel] - t[j]) / sdur)
        ex[sel] = x0 + (x1 - x0) * s
        ey[sel] = y0 + (y1 - y0) * s
        sac_rows.append((float(t[j]), float(t[j] + sdur), amp * float(np.hypot(gx, gy)) / np.sqrt(2)))
    for r in schedule.fixations.itertuples(index=False):
        on = lead_in_s + r.onset_s + latency_s
        fix_rows.append((on, lead_in_s + r.offset_s + latency_s, ox + gx * r.x0_deg, oy + gy * r.y0_deg))
    rng = np.random.default_rng([int(seed), 41])
    yaw = ox + gx * ex
    pitch = oy + gy * ey
    if drift_sd_deg > 0:
        yaw = yaw + _ou_noise(rng, n, rate_hz=rate_hz, sd=drift_sd_deg, tau_s=0.2)
        pitch = pitch + _ou_noise(rng, n, rate_hz=rate_hz, sd=drift_sd_deg, tau_s=0.2)
    if head_motion:
        motion = dict(HEAD_MOTION_DEFAULTS, distance_mm=dist)
        if isinstance(head_motion, dict):
            motion.update(head_motion)
        head = _head_track(rng, t, motion)
    else:
        head = {"head_yaw_deg": np.zeros(n), "head_pitch_deg": np.zeros(n), "head_roll_deg": np.zeros(n),
                "head_x_mm": np.zeros(n), "head_y_mm": np.zeros(n), "head_z_mm": np.full(n, dist)}
    samples = pd.DataFrame({"t_s": t, "yaw_deg": yaw, "pitch_deg": pitch, "blink": np.zeros(n, bool),
                            "lid_closure": np.zeros(n), **head})
    fixations = pd.DataFrame(fix_rows, columns=["onset_s", "offset_s", "yaw_deg", "pitch_deg"])
    fixations.insert(2, "duration_ms", (fixations["offset_s"] - fixations["onset_s"]) * 1000.0)
    saccades = pd.DataFrame(sac_rows, columns=["onset_s", "offset_s", "amplitude_deg"])
    saccades.insert(2, "duration_ms", (saccades["offset_s"] - saccades["onset_s"]) * 1000.0)
    blinks = pd.DataFrame(columns=["onset_s", "offset_s", "duration_ms", "closure_onset_s", "closure_offset_s"])
    params = {"duration_s": float(t[-1]), "rate_hz": float(rate_hz), "seed": int(seed), "task": "target_sequence",
              "head_motion": bool(head_motion), "head_distance_mm": dist,
              "target_sequence": {"flash_onset_s": float(lead_in_s), "flash_s": float(schedule.flash_s),
                                  "offset_deg": [ox, oy], "gain": [gx, gy], "latency_s": float(latency_s),
                                  "drift_sd_deg": float(drift_sd_deg), "schedule_seed": int(schedule.seed)}}
    return Trajectory(samples=samples, fixations=fixations, saccades=saccades, blinks=blinks, params=params)


def brighten_flash(path, *, onset_s: float, duration_s: float, gain: float = FLASH_GAIN,
                   lift: float = FLASH_LIFT) -> dict:
    """Re-encode the clip at ``path`` with the frames whose time is in [onset_s, onset_s + duration_s) brightened.

    Frame times are kept. Returns ``{"flash_first_frame": i, "flash_first_frame_t_s": t, "flash_frames": n}``.
    """
    import av

    from aspectus.atomic import atomic_path
    from aspectus.synth.clip_writer import ClipWriter

    path = Path(path)
    first, count, first_t, t_first_frame = None, 0, None, None
    with av.open(str(path)) as src, atomic_path(path) as tmp:
        st = src.streams.video[0]
        rate = float(st.average_rate or 30)
        w = ClipWriter(path, tmp, width_px=st.codec_context.width, height_px=st.codec_context.height, fps=rate,
                       codec="libx264", crf=18, vfr=True)
        try:
            for i, fr in enumerate(src.decode(st)):
                pts_s = float(fr.pts * fr.time_base)
                if t_first_frame is None:
                    t_first_frame = pts_s
                t = pts_s - t_first_frame
                img = fr.to_ndarray(format="rgb24")
                if onset_s - 1e-6 <= t < onset_s + duration_s - 1e-6:
                    img = np.clip(img.astype(np.float32) * gain + lift, 0, 255).astype(np.uint8)
                    if first is None:
                        first, first_t = i, t
                    count += 1
                w.write(img, pts_s)
            w.close()
        except BaseException:
            w.abort()
            raise
    return {"flash_first_frame": first, "flash_first_frame_t_s": first_t, "flash_frames": count}


def render_target_clip(path, schedule, *, lead_in_s: float = 2.0, tail_s: float = 1.0, offset_deg=(2.0, -6.0),
                       gain=(1.0, 1.0), latency_s: float = 0.2, drift_sd_deg: float = 0.05, head_motion=False,
                       head_distance_mm: float | None = None, seed: int = 0, **render_kwargs):
    """Render a clip whose eyes follow ``schedule`` and whose picture brightens during the flash.

    ``render_kwargs`` go to :func:`aspectus.synth.render.render_clip` (``size_px``, ``fps``, ``face``,
    ``noise_sd``, ``darkness``, ...); the other arguments to :func:`schedule_trajectory` (``head_distance_mm``:
    the face's distance from the camera, which sets the iris's size in the picture). Writes
    ``<stem>_targets.json`` (the sequence's truth) beside the clip's other truth files and returns
    ``(RenderResult, truth dict)``.
    """
    from aspectus.atomic import sha256_file, write_json
    from aspectus.synth.render import render_clip

    if render_kwargs.get("rotation_deg"):
        raise ParameterError("render_target_clip writes upright clips only (no rotation_deg)")
    traj = schedule_trajectory(schedule, lead_in_s=lead_in_s, tail_s=tail_s, offset_deg=offset_deg, gain=gain,
                               latency_s=latency_s, drift_sd_deg=drift_sd_deg, head_motion=head_motion,
                               head_distance_mm=head_distance_mm, seed=seed)
    res = render_clip(path, traj, seed=seed, **render_kwargs)
    flash = brighten_flash(res.path, onset_s=lead_in_s, duration_s=schedule.flash_s)
    truth = dict(traj.params["target_sequence"], **flash, clip=Path(path).name,
                 clip_sha256=sha256_file(res.path), schedule=schedule.to_dict())
    write_json(Path(f"{Path(path).with_suffix('')}_targets.json"), truth)
    return res, truth
