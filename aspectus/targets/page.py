"""The target sequence as a self-contained offline HTML page and as a video file.

The page (:func:`write_page`) is one HTML file with the schedule inside it:
no scripts, styles, fonts or pictures from anywhere else (its
Content-Security-Policy forbids every fetch), so a school can copy it to
any computer and open it in a browser without a network. It shows a short
instruction; the space bar (or Enter) switches to full screen and starts
the sequence; Escape stops it. The dot is drawn from the schedule's
degrees, converted to the window's pixels with the schedule's screen
geometry; when the window's shape differs from the schedule's screen by
more than 2 %, the instruction says so before the start.

For tests and kiosks, ``#press=Space`` after the file name makes the page
press its own start key once it has loaded (the same handler a real key
press runs, except that it starts at once without asking for full screen:
a browser grants that only to a real key press, and a kiosk browser opens
full screen by itself). While it runs the page keeps ``window.aspectusTargets`` up to
date: ``started``, ``t_s`` (schedule time of the last drawn picture),
``index`` (target on screen, -1 for none), ``flash`` (bool), ``done``.

The video (:func:`write_video`) shows the same sequence: ``lead_in_s`` of
background with a short text, then the flash at schedule time 0.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from aspectus.targets.schedule import Schedule, deg_to_px

_PAGE = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="__CSP__">
<title>Target sequence</title>
<style>
html, body { margin: 0; padding: 0; height: 100%; overflow: hidden; background: __BG__; }
canvas { display: block; width: 100vw; height: 100vh; }
body.running { cursor: none; }
#info { position: absolute; left: 8%; right: 8%; top: 30%; color: #e0e0e0; font: 22px sans-serif;
        text-align: center; line-height: 1.5; }
#warn { color: #ffb060; }
</style>
</head>
<body>
<canvas id="c"></canvas>
<div id="info">
<p>Sit at about __DIST_CM__ cm from the screen and keep your head where it is.<br>
The screen flashes once; then look at each dot until it goes away, and follow the moving dot.</p>
<p>Press the space bar to start. Escape stops.</p>
<p id="warn"></p>
</div>
<script>
"use strict";
const S = __SCHEDULE__;
const canvas = document.getElementById("c");
const ctx = canvas.getContext("2d");
const info = document.getElementById("info");
const state = {started: false, t_s: null, index: -1, flash: false, done: false};
window.aspectusTargets = state;
let t0 = null;
function fit() {
  const dpr = window.devicePixelRatio || 1;
  canvas.width = Math.round(window.innerWidth * dpr);
  canvas.height = Math.round(window.innerHeight * dpr);
  const want = S.screen.width_px / S.screen.height_px, have = canvas.width / canvas.height;
  document.getElementById("warn").textContent = Math.abs(have / want - 1) > 0.02 ?
    "This window is " + canvas.width + " x " + canvas.height + " pixels; the sequence was made for a screen of " +
    S.screen.width_px + " x " + S.screen.height_px + ". Show it full screen on that screen." : "";
}
function toPx(xd, yd) {
  const mx = S.screen.width_mm / S.screen.width_px, my = S.screen.height_mm / S.screen.height_px;
  const d = S.screen.viewing_distance_mm;
  const x = S.screen.width_px / 2 + Math.tan(xd * Math.PI / 180) * d / mx;
  const y = S.screen.height_px / 2 - Math.tan(yd * Math.PI / 180) * d / my;
  return [x * canvas.width / S.screen.width_px, y * canvas.height / S.screen.height_px];
}
function draw() {
  if (!state.started) return;
  const t = (performance.now() - t0) / 1000;
  state.t_s = t;
  state.flash = t < S.flash.offset_s;
  ctx.fillStyle = state.flash ? S.colours.flash : S.colours.background;
  ctx.fillRect(0, 0, canvas.width, canvas.height);
  state.index = -1;
  if (t >= S.duration_s) { state.done = true; return; }
  for (const g of S.targets) {
    if (t >= g.onset_s && t < g.offset_s) {
      const f = (t - g.onset_s) / (g.offset_s - g.onset_s);
      const p = toPx(g.x0_deg + f * (g.x1_deg - g.x0_deg), g.y0_deg + f * (g.y1_deg - g.y0_deg));
      const r = S.dot_radius_px * canvas.width / S.screen.width_px;
      ctx.fillStyle = S.colours.dot;
      ctx.beginPath(); ctx.arc(p[0], p[1], r, 0, 2 * Math.PI); ctx.fill();
      ctx.fillStyle = S.colours.dot_centre;
      ctx.beginPath(); ctx.arc(p[0], p[1], Math.max(1, r * 0.25), 0, 2 * Math.PI); ctx.fill();
      state.index = g.index;
      break;
    }
  }
}
function loop() { draw(); if (state.started && !state.done) requestAnimationFrame(loop); }
function start() {
  if (state.started) return;
  info.style.display = "none";
  document.body.className = "running";
  state.started = true;
  t0 = performance.now();
  loop();
  setInterval(draw, 8);
}
function stop() {
  state.done = true; state.started = false;
  ctx.fillStyle = S.colours.background; ctx.fillRect(0, 0, canvas.width, canvas.height);
  if (document.fullscreenElement) document.exitFullscreen().catch(function () {});
}
function onKey(e) {
  if (e.code === "Escape" || e.key === "Escape") { stop(); return; }
  if (e.code === "Space" || e.code === "Enter" || e.key === " " || e.key === "Enter") {
    e.preventDefault();
    const el = document.documentElement;
    // a browser grants full screen only to a real key press; a synthetic one (#press=) starts at once,
    // rather than after the refused request settles, which may take a while on a busy machine
    if (e.isTrusted && el.requestFullscreen && !document.fullscreenElement) {
      el.requestFullscreen().catch(function () {}).finally(function () { fit(); start(); });
    } else { start(); }
  }
}
window.addEventListener("resize", fit);
document.addEventListener("keydown", onKey);
fit();
ctx.fillStyle = S.colours.background; ctx.fillRect(0, 0, canvas.width, canvas.height);
const m = /press=(\\w+)/.exec(window.location.hash);
if (m) { document.dispatchEvent(new KeyboardEvent("keydown", {code: m[1], key: m[1] === "Space" ? " " : m[1]})); }
</script>
</body>
</html>
"""


#: the page's Content-Security-Policy: inline script and style only, no fetch of any kind
CSP = ("default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; img-src 'none'; "
       "connect-src 'none'; font-src 'none'; media-src 'none'; frame-src 'none'; form-action 'none'; base-uri 'none'")


def page_html(schedule: Schedule) -> str:
    """The page's HTML text (everything inline)."""
    data = json.dumps(schedule.to_dict(), separators=(",", ":")).replace("</", "<\\/")
    return (_PAGE.replace("__SCHEDULE__", data).replace("__CSP__", CSP).replace("__BG__", schedule.colours["background"])
            .replace("__DIST_CM__", f"{schedule.screen.viewing_distance_mm / 10:.0f}"))


def write_page(schedule: Schedule, path) -> Path:
    """Write the offline HTML page of ``schedule`` to ``path`` (atomically)."""
    from aspectus.atomic import atomic_path

    path = Path(path)
    with atomic_path(path) as tmp:
        Path(tmp).write_text(page_html(schedule), encoding="utf-8")
    return path


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    h = hex_colour.lstrip("#")
    return int(h[0:2], 16), int(h[2:4], 16), int(h[4:6], 16)


def draw_frame(schedule: Schedule, t_s: float, *, size_px: tuple[int, int] | None = None) -> np.ndarray:
    """The sequence's picture at schedule time ``t_s`` (RGB uint8, screen size unless ``size_px``)."""
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    w, h = size_px or (schedule.screen.width_px, schedule.screen.height_px)
    flash = 0.0 <= t_s < schedule.flash_s
    img = np.empty((h, w, 3), np.uint8)
    img[:] = _rgb(schedule.colours["flash" if flash else "background"])
    if 0.0 <= t_s < schedule.duration_s:
        x, y, idx = schedule.position_deg([t_s])
        if idx[0] >= 0:
            xp, yp = deg_to_px(schedule.screen, x[0], y[0])
            k = w / schedule.screen.width_px
            shift = 4  # sub-pixel centre
            c = (int(round(float(xp) * k * 16)), int(round(float(yp) * (h / schedule.screen.height_px) * 16)))
            r = schedule.dot_radius_px * k
            cv2.circle(img, c, int(round(r * 16)), _rgb(schedule.colours["dot"]), -1, cv2.LINE_AA, shift)
            cv2.circle(img, c, int(round(max(1.0, 0.25 * r) * 16)), _rgb(schedule.colours["dot_centre"]), -1,
                       cv2.LINE_AA, shift)
    return img


def write_video(schedule: Schedule, path, *, fps: float = 30.0, lead_in_s: float = 2.0,
                size_px: tuple[int, int] | None = None, progress=None, cancel=None) -> Path:
    """Write the sequence as a video (H.264 .mp4/.mkv/.mov) at the screen's size, ``lead_in_s`` before the flash.

    The clip shows the background and a line of text during the lead-in,
    then the flash at ``lead_in_s``, then the targets; it ends 0.5 s after
    the sequence.
    """
    from aspectus._env import import_cv2
    from aspectus.atomic import atomic_path
    from aspectus.errors import Cancelled, ParameterError
    from aspectus.synth.clip_writer import ClipWriter

    cv2 = import_cv2()
    path = Path(path)
    if not (np.isfinite(fps) and 10 <= fps <= 240):
        raise ParameterError(f"video fps must be between 10 and 240, got {fps!r}")
    if not (np.isfinite(lead_in_s) and 0 <= lead_in_s <= 60):
        raise ParameterError(f"lead_in_s must be between 0 and 60 s, got {lead_in_s!r}")
    w, h = size_px or (schedule.screen.width_px, schedule.screen.height_px)
    w, h = int(w) // 2 * 2, int(h) // 2 * 2
    n = int(np.ceil((lead_in_s + schedule.duration_s + 0.5) * fps))
    with atomic_path(path) as tmp:
        writer = ClipWriter(path, tmp, width_px=w, height_px=h, fps=float(fps), codec="libx264", crf=20)
        try:
            for i in range(n):
                if cancel is not None and cancel.is_set():
                    raise Cancelled(f"writing {path.name} cancelled at frame {i}")
                t = i / fps - lead_in_s
                img = draw_frame(schedule, t, size_px=(w, h))
                if t < 0:
                    cv2.putText(img, "Look at the screen: it flashes, then follow the dots", (int(0.08 * w), h // 2),
                                cv2.FONT_HERSHEY_SIMPLEX, max(0.5, w / 1600), (220, 220, 220), 2, cv2.LINE_AA)
                writer.write(img, i / fps)
                if progress is not None and i % 30 == 0:
                    progress((i + 1) / n, f"writing {path.name}: frame {i + 1} of {n}")
            writer.close()
        except BaseException:
            writer.abort()
            raise
    return path
