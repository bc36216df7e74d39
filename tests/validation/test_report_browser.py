"""The validation reports in a real browser: headless Chromium (Debian's package, /usr/bin/chromium, driven by
Playwright's Python package) at 1366x768 and as printed on A4: nothing runs off the right edge and every image
loads. Also the report's reader-facing content: names with units, the compact table, statistics withheld
below the minimum n with the reason, plain axis labels.

Skips (with the reason) where Chromium or Playwright is absent; .ci/run installs both.
"""
from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus.synth.lab_recording import write_demo_reference
from aspectus.synth.trajectory import synth_trajectory
from aspectus.validation.pair import ValidateParams, validate_pair
from aspectus.validation.study import validate_study

CHROMIUM = os.environ.get("ASPECTUS_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
#: A4 is 210 mm wide; the report's print style has 14 mm margins: 182 mm = 688 CSS px at 96 px per inch
A4_CONTENT_PX = int(182 / 25.4 * 96)


def _webcam_folder(folder: Path, truth: pd.DataFrame, *, seed=0, gain=(1.1, 0.9), noise_deg=0.4) -> Path:
    rng = np.random.default_rng(seed)
    t = np.arange(0, truth["t_s"].iloc[-1], 1 / 30)
    blink = np.interp(t, truth["t_s"], truth["blink"].astype(float)) > 0.5
    yaw = np.interp(t, truth["t_s"], truth["yaw_deg"]) * gain[0] + 4.0 + rng.normal(0, noise_deg, len(t))
    pitch = np.interp(t, truth["t_s"], truth["pitch_deg"]) * gain[1] - 3.0 + rng.normal(0, noise_deg, len(t))
    folder.mkdir(parents=True)
    pd.DataFrame({"t_s": t, "valid": ~blink, "yaw_deg": np.where(blink, np.nan, yaw),
                  "pitch_deg": np.where(blink, np.nan, pitch), "blink": blink}).to_parquet(folder / "samples.parquet")
    return folder


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """A pair report with enough windows, one with too few, and a study report of three participants."""
    from aspectus.events.analysis import AnalysisParams

    root = tmp_path_factory.mktemp("reports")
    ap = AnalysisParams(detector="idt")
    out = {}
    rows = []
    for k, (dur, seed) in enumerate(((42.0, 3), (12.0, 4), (40.0, 5))):
        truth = synth_trajectory(duration_s=dur, seed=seed, task="reading").samples
        ref = write_demo_reference(truth, root / f"lab{k}", stem=f"p0{k + 1}_s01", offset_s=-1.25, rate_hz=250.0,
                                   seed=k + 1)
        cam = _webcam_folder(root / f"cam{k}", truth, seed=k)
        rows.append((cam, ref["physio"], f"p0{k + 1}"))
    # window length chosen from the 40.75 s overlap (no --window-s)
    r = validate_pair(rows[0][0], rows[0][1], root / "pair", params=ValidateParams(analysis=ap), participant="p01")
    out["pair"] = root / "pair" / "report.html"
    out["pair_result"] = r
    r_small = validate_pair(rows[1][0], rows[1][1], root / "small", params=ValidateParams(analysis=ap))
    out["small"] = root / "small" / "report.html"
    out["small_result"] = r_small
    # p01's webcam folder holds a known-target check (a wrong gain): the study report shows its section
    from aspectus.atomic import write_json
    from aspectus.synth.target_gaze import schedule_trajectory
    from aspectus.targets.analysis import check_samples
    from aspectus.targets.check import CHECK_JSON
    from aspectus.targets.schedule import Screen, make_schedule

    sched = make_schedule(Screen(1920, 1080, 344.0, 193.5, 600.0), seed=2, fixation_s=1.5, n_fixations=9)
    tr = schedule_trajectory(sched, lead_in_s=2.0, gain=(0.6, 0.6), seed=1)
    s = tr.at(np.arange(0, tr.duration_s, 1 / 30)).assign(valid=True)
    write_json(rows[0][0] / CHECK_JSON, check_samples(s, sched, start_s=2.0, run_events=False).to_dict()
               | {"format": "aspectus.target_check"})
    man = root / "pairs.csv"
    man.write_text("webcam,reference,participant\n" + "".join(f"{c},{ref},{p}\n" for c, ref, p in rows))
    validate_study(man, root / "study", params=ValidateParams(analysis=ap, window_s=4.0), figures=True)
    out["study"] = root / "study" / "report.html"
    return out


def test_window_length_chosen_from_overlap_and_recorded(reports):
    import json

    r = reports["pair_result"]
    side = json.loads((reports["pair"].parent / "validation.json").read_text())
    # 40.75 s of overlap: the feature window length (10 s) gives 4 windows; 4 s is the longest candidate with >= 10
    assert r.meta["windows"] >= 10 and side["params"]["window_s"] == 4.0
    assert side["params"]["step_s"] == 4.0 and side["params"]["analysis"]["step_s"] == 4.0  # no stale 10 s
    assert "chosen from the overlap" in side["window_choice"]
    html = reports["pair"].read_text()
    assert "chosen from the overlap" in html


def test_report_reads_for_a_reader(reports):
    html = reports["pair"].read_text()
    # names with units instead of column names, the compact table's columns, the full table as a download
    assert "Fixation duration, mean (ms)" in html and "Fixations (per window)" in html
    for col in ("Webcam mean", "Lab tracker mean", "r [95 % CI]", "ICC [95 % CI]", "Bias [95 % limits]"):
        assert col in html
    assert "download='agreement.csv'" in html and "data:text/csv;base64," in html
    assert "fixation_duration_mean_ms</td>" not in html  # no raw column names in the tables
    # the offset's confidence on a stated scale; one overlap figure
    assert "on a scale from 0" in html
    assert html.count("time both recorded") == 1 and "overlap_s" not in html
    # too few windows: no statistics, the reason and how to get more
    small = reports["small"].read_text()
    assert "not shown" in small and "could be paired" in small and "shorter windows" in small
    n = int(reports["small_result"].meta["windows"])
    assert n < 10 and f"Only {n} windows could be paired" in small


def test_study_report_shows_the_known_target_check(reports):
    html = reports["study"].read_text()
    assert "Gaze quality on the known-target sequence" in html and "Exclusion rule" in html
    assert "yes: " in html and "yaw gain 0.60 outside 0.8-1.25" in html and html.count(">no check<") == 2
    assert "3 pairs validated" in html and "both sides (I-DT (dispersion threshold))" in html and "pair(s)" not in html


def test_figures_have_no_axis_offset(reports):
    """A constant difference (blinks: 0 - 0) drew a "1e-17" offset above the axis; tick labels are plain now."""
    from aspectus.validation.report import bland_altman_figure

    pairs = pd.DataFrame({"blink_count_webcam": [1.0, 1.0, 1.0 + 1e-17, 1.0],
                          "blink_count_reference": [1.0, 1.0, 1.0, 1.0],
                          "fixation_count_webcam": [1e6 + 1, 1e6 + 2, 1e6 + 3, 1e6 + 4],
                          "fixation_count_reference": [1e6, 1e6 + 2, 1e6 + 2, 1e6 + 5]})
    import matplotlib.figure

    seen = []
    orig = matplotlib.figure.Figure.savefig

    def spy(self, *a, **kw):
        self.canvas.draw()
        for ax in self.axes:
            for axis in (ax.xaxis, ax.yaxis):
                seen.append(axis.get_major_formatter().get_offset())
        return orig(self, *a, **kw)

    matplotlib.figure.Figure.savefig = spy
    try:
        bland_altman_figure(pairs, pd.DataFrame(), ["blink_count", "fixation_count"], title="t")
    finally:
        matplotlib.figure.Figure.savefig = orig
    assert seen and all(o == "" for o in seen), seen


def _browser():
    pw = pytest.importorskip("playwright.sync_api", reason="Playwright's Python package is not installed")
    if not Path(CHROMIUM).exists():
        pytest.skip(f"no Chromium at {CHROMIUM} (Debian: apt-get install chromium; .ci/run installs it)")
    return pw


_OVERFLOW_JS = """() => {
  const w = document.documentElement.clientWidth;
  const wide = [];
  for (const el of document.querySelectorAll('body *')) {
    const r = el.getBoundingClientRect();
    if (r.width > 0 && r.right > w + 1) wide.push(el.tagName + ' ' + (el.textContent || '').slice(0, 40) + ' right=' + Math.round(r.right));
  }
  return {scroll: document.documentElement.scrollWidth, client: w, wide: wide.slice(0, 5)};
}"""
#: cells whose longest word is wider than the cell's content (a word broken across lines, as "Stat / us" was in the
#: study report's per-participant table); the facts table and a compact table's last column (paths, notes) may break
_BROKEN_WORDS_JS = """() => {
  const ctx = document.createElement('canvas').getContext('2d');
  const bad = [];
  for (const cell of document.querySelectorAll('th, td')) {
    const table = cell.closest('table');
    if (table.classList.contains('facts')) continue;
    if (table.classList.contains('compact') && cell === cell.parentElement.lastElementChild) continue;
    const st = getComputedStyle(cell);
    ctx.font = st.fontWeight + ' ' + st.fontSize + ' ' + st.fontFamily;
    const inner = cell.clientWidth - parseFloat(st.paddingLeft) - parseFloat(st.paddingRight);
    for (const word of (cell.innerText || '').split(/\\s+/)) {
      if (word && ctx.measureText(word).width > inner + 1) { bad.push(word + ' in ' + Math.round(inner) + ' px'); break; }
    }
  }
  return bad.slice(0, 8);
}"""
_IMAGES_JS = "() => Array.from(document.images).map(i => [i.alt, i.complete && i.naturalWidth > 0])"


@pytest.mark.parametrize("which", ["pair", "small", "study"])
def test_report_fits_screen_and_a4_and_images_load(reports, which):
    pw = _browser()
    url = reports[which].resolve().as_uri()
    with pw.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox", "--disable-gpu"])
        try:
            page = browser.new_page(viewport={"width": 1366, "height": 768})
            page.goto(url)
            images = page.evaluate(_IMAGES_JS)
            assert images and all(ok for _alt, ok in images), images
            screen = page.evaluate(_OVERFLOW_JS)
            assert screen["scroll"] <= screen["client"] and not screen["wide"], screen
            broken = page.evaluate(_BROKEN_WORDS_JS)
            assert not broken, broken
            page.emulate_media(media="print")
            page.set_viewport_size({"width": A4_CONTENT_PX, "height": 1000})
            printed = page.evaluate(_OVERFLOW_JS)
            assert printed["scroll"] <= printed["client"] and not printed["wide"], printed
            pdf = page.pdf(format="A4")
            assert pdf[:5] == b"%PDF-" and len(pdf) > 10_000
        finally:
            browser.close()


def test_too_few_windows_says_how_to_get_more_for_a_pair_and_for_a_study():
    """Below the minimum the reason names the ways to more windows that apply: a single pair may be compared with
    others; a study's pooled windows cannot be helped that way."""
    from aspectus.validation.report import withheld_reason

    one = withheld_reason(4)
    study = withheld_reason(4, pooled=True)
    assert "Only 4 windows could be paired" in one and "several clips compared together" in one
    assert "Only 4 windows could be paired" in study and "several clips" not in study and "Compare all" not in study
    assert "Feature window length" in study and "longer recordings" in study
    assert withheld_reason(1, "participants").startswith("Only 1 participant could be paired")
    assert withheld_reason(1, "participants").endswith("To get them: at least 10 participants.")
    # a pair's task segments: more participants would not add any (the note read "To get more: more participants")
    seg = withheld_reason(3, "segments")
    assert "participants" not in seg and "fixed windows" in seg
