"""The offline page in headless Chromium, and the video of the same sequence.

Chromium (Debian package ``chromium``; ``.ci/run`` installs it) opens the
generated page from a file, with virtual time: ``--virtual-time-budget=N``
takes the screenshot N ms of page time after the page started loading, so
the times below do not depend on the machine's speed. The page presses its
own start key (``#press=Space``, the handler a real key press runs).
Requests the page makes are read from Chromium's network log; a control
page that does fetch something shows that the log would catch it.
"""
from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from aspectus.targets.page import draw_frame, write_page, write_video
from aspectus.targets.schedule import Screen, deg_to_px, make_schedule

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
W, H = 800, 450

needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium not installed (Debian package 'chromium'; .ci/run installs it)")


def _schedule():
    # a 16:9 screen of 344 x 193.5 mm at 600 mm, drawn on an 800 x 450 window
    return make_schedule(Screen(W, H, 344.0, 193.5, 600.0), seed=4, fixation_s=1.0, n_fixations=9, pursuit_sweeps=1)


def _chromium(tmp: Path, url: str, *, budget_ms: int, shot: Path | None = None, netlog: Path | None = None):
    ud = tmp / f"profile-{budget_ms}-{shot.stem if shot else 'x'}"
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={ud}",
           "--host-resolver-rules=MAP * ~NOTFOUND", "--hide-scrollbars", "--force-device-scale-factor=1",
           f"--window-size={W},{H}", f"--virtual-time-budget={budget_ms}"]
    if shot is not None:
        cmd.append(f"--screenshot={shot}")
    if netlog is not None:
        cmd.append(f"--log-net-log={netlog}")
    cmd.append(url)
    subprocess.run(cmd, check=True, capture_output=True, timeout=120)


def _read_png(path: Path) -> np.ndarray:
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    img = cv2.imread(str(path), cv2.IMREAD_COLOR)
    assert img is not None, f"no screenshot at {path}"
    return img[:, :, ::-1]


def _dot_centre(img: np.ndarray):
    """Centre of the bright dot (pixels brighter than 200 on the dark background), or None."""
    m = img.mean(axis=2) > 200
    if not m.any() or m.mean() > 0.5:
        return None
    ys, xs = np.nonzero(m)
    return float(xs.mean()), float(ys.mean())


def _page_requests(netlog: Path) -> list[str]:
    """URLs of requests a page started (the browser's own background requests have no page initiator)."""
    d = json.loads(netlog.read_text())
    types = {v: k for k, v in d["constants"]["logEventTypes"].items()}
    urls = []
    for e in d["events"]:
        p = e.get("params") or {}
        if types.get(e["type"]) == "URL_REQUEST_START_JOB" and "url" in p and p.get("initiator") != "not an origin":
            urls.append(p.get("url"))
    return urls


@needs_chromium
def test_page_shows_targets_at_scheduled_places_and_times_offline(tmp_path):
    sched = _schedule()
    page = write_page(sched, tmp_path / "targets.html")
    url = page.as_uri() + "#press=Space"
    text = page.read_text()
    assert "http://" not in text and "https://" not in text and "src=" not in text  # nothing to fetch

    # the flash: the whole window white, 0.1 s after the start
    shot = tmp_path / "flash.png"
    netlog = tmp_path / "netlog.json"
    _chromium(tmp_path, url, budget_ms=100, shot=shot, netlog=netlog)
    img = _read_png(shot)
    assert img.shape[:2] == (H, W)
    assert img.mean() > 250, f"mean grey {img.mean():.0f}: the flash is not on screen at 0.1 s"
    assert _page_requests(netlog) == []

    # still dots: in the middle of each of the first three, the dot is where the schedule puts it
    fx = sched.fixations.iloc[:3]
    for r in fx.itertuples():
        t_ms = int(round(1000 * (r.onset_s + r.offset_s) / 2))
        shot = tmp_path / f"dot{r.index}.png"
        _chromium(tmp_path, url, budget_ms=t_ms, shot=shot)
        c = _dot_centre(_read_png(shot))
        assert c is not None, f"no dot on screen at {t_ms} ms (target {r.index})"
        assert abs(c[0] - r.x0_px) < 2.0 and abs(c[1] - r.y0_px) < 2.0, (r.index, c, (r.x0_px, r.y0_px))

    # the moving dot: its place gives the page's clock. Chromium takes the screenshot a few frames after the
    # virtual-time budget (measured: 0-70 ms; more when the machine is loaded), so 0.15 s is allowed
    pu = sched.pursuits.iloc[0]
    t_ms = int(round(1000 * (pu.onset_s + 0.4 * (pu.offset_s - pu.onset_s))))
    shot = tmp_path / "pursuit.png"
    _chromium(tmp_path, url, budget_ms=t_ms, shot=shot)
    c = _dot_centre(_read_png(shot))
    assert c is not None
    xs = np.linspace(pu.onset_s, pu.offset_s, 2001)
    xd, yd, _ = sched.position_deg(xs)
    xp, _yp = deg_to_px(sched.screen, xd, yd)
    t_page = xs[int(np.argmin(np.abs(xp - c[0])))]
    assert abs(t_page - t_ms / 1000) < 0.15, f"the moving dot shows schedule time {t_page:.3f} s at {t_ms} ms"

    # after the end: background only
    shot = tmp_path / "end.png"
    _chromium(tmp_path, url, budget_ms=int(1000 * sched.duration_s) + 300, shot=shot)
    img = _read_png(shot)
    assert _dot_centre(img) is None and img.mean() < 80


@needs_chromium
def test_network_log_catches_a_page_that_fetches(tmp_path):
    """Control for the check above: a page that loads a picture and fetches a URL shows both requests."""
    ctl = tmp_path / "control.html"
    ctl.write_text('<html><body><img src="http://127.0.0.1:9/probe.png">'
                   '<script>fetch("http://example.invalid/x").catch(function () {})</script></body></html>')
    netlog = tmp_path / "netlog.json"
    _chromium(tmp_path, ctl.as_uri(), budget_ms=500, shot=tmp_path / "c.png", netlog=netlog)
    got = _page_requests(netlog)
    assert "http://127.0.0.1:9/probe.png" in got and "http://example.invalid/x" in got


@needs_chromium
def test_page_waits_for_the_key(tmp_path):
    """Without a key press the page shows its instruction and no flash or dot."""
    sched = _schedule()
    page = write_page(sched, tmp_path / "targets.html")
    shot = tmp_path / "idle.png"
    _chromium(tmp_path, page.as_uri(), budget_ms=2000, shot=shot)
    img = _read_png(shot)
    assert img.mean() < 80  # dark background with a little text, not the white flash
    assert not (img.mean(axis=2) > 200).sum() > 0.2 * img.shape[0] * img.shape[1]


def test_video_shows_the_same_sequence(tmp_path):
    from aspectus.webcam.video import iter_frames

    sched = _schedule()
    path = write_video(sched, tmp_path / "targets.mp4", fps=30.0, lead_in_s=1.0, size_px=(W, H))
    frames = {f.index: f for f in iter_frames(path)}
    assert len(frames) == int(np.ceil((1.0 + sched.duration_s + 0.5) * 30))
    # frame 30 is schedule time 0: the flash; frame 29 is before it
    assert frames[30].image.mean() > 240 and frames[29].image.mean() < 80
    r = sched.fixations.iloc[2]
    i = int(round((1.0 + (r.onset_s + r.offset_s) / 2) * 30))
    c = _dot_centre(frames[i].image)
    assert c is not None and abs(c[0] - r.x0_px) < 2.0 and abs(c[1] - r.y0_px) < 2.0
    # the drawing function and the video agree
    ref = draw_frame(sched, i / 30 - 1.0, size_px=(W, H))
    assert np.abs(ref.astype(int) - frames[i].image.astype(int)).mean() < 3.0
