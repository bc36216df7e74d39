"""Single widgets offscreen: column-mapping dialog, parameters panel, plot canvas coordinates."""
from __future__ import annotations

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from _window import shown_window  # noqa: E402
def test_mapping_dialog_reads_table_and_names_problems(qtbot, tmp_path):
    from ui.mapping_dialog import MappingDialog

    p = tmp_path / "p01_s01_lab.csv"
    p.write_text("time_ms,gx_deg,gy_deg,ok\n0,1.0,2.0,1\n4,1.1,2.1,1\n8,n/a,2.2,0\n12,1.3,oops,1\n")
    dlg = MappingDialog(p)
    qtbot.addWidget(dlg)
    assert dlg.time_col.currentText() == "time_ms"  # guessed from the header
    dlg.time_unit.setCurrentIndex(dlg.time_unit.findData("ms"))
    dlg.x_col.setCurrentText("gx_deg")
    dlg.y_col.setCurrentText("gy_deg")
    dlg.units.setCurrentIndex(dlg.units.findData("deg"))
    # a non-numeric cell: the dialog stays open and says where
    assert not dlg.try_accept()
    assert "p01_s01_lab.csv" in dlg.error.text() and "5" in dlg.error.text()
    p.write_text("time_ms,gx_deg,gy_deg,ok\n0,1.0,2.0,1\n4,1.1,2.1,1\n8,n/a,2.2,0\n12,1.3,2.3,1\n")
    assert dlg.try_accept()
    assert dlg.mapping.time_unit == "ms" and dlg.mapping.units == "deg"
    assert list(dlg.samples["t_s"]) == pytest.approx([0.0, 0.004, 0.008, 0.012])
    assert list(dlg.samples["valid"]) == [True, True, False, True]
    # pixels need a screen: the dialog builds one from its fields
    dlg.units.setCurrentIndex(dlg.units.findData("px"))
    assert dlg.mapping_dict()["screen"]["width_px"] == 1920


def test_params_panel_emits_validated_params(qtbot):
    from ui.params_panel import ParamsPanel

    panel = ParamsPanel()
    qtbot.addWidget(panel)
    got = []
    panel.analysis_changed.connect(got.append)
    panel.set_value("detector", "ivt")
    assert panel._groups["ivt"].isVisibleTo(panel) and not panel._groups["idt"].isVisibleTo(panel)
    panel.set_value("merge_gap_ms", 120.0)
    panel.flush()
    assert len(got) == 1 and got[0]["detector"] == "ivt" and got[0]["merge_gap_ms"] == 120.0
    # every AnalysisParams field is offered
    from dataclasses import fields

    from aspectus.events.analysis import AnalysisParams

    assert {f.name for f in fields(AnalysisParams)} == set(panel._widgets)
    # values load back without emitting
    panel.set_values({"detector": "idt", "min_fixation_ms": 80.0}, {"fov_deg": 70.0})
    assert panel.values()["detector"] == "idt" and panel.values()["min_fixation_ms"] == 80.0
    assert panel.process_values()["fov_deg"] == 70.0 and len(got) == 1


def test_plot_canvas_maps_pixels_to_data(qtbot):
    from ui.plot_canvas import PlotCanvas

    c = PlotCanvas()
    qtbot.addWidget(c)
    c.resize(400, 300)
    c.show()

    def draw(fig):
        ax = fig.add_subplot(1, 1, 1)
        ax.set_xlim(10, 20)
        ax.set_ylim(-5, 5)

    with qtbot.waitSignal(c.rendered, timeout=20_000):
        c.plot(draw)
    b = c.boxes[0]
    assert b.xlim == (10.0, 20.0)
    x, y = b.to_data(b.x0 + 0.25 * b.width, b.y0 + 0.25 * b.height)
    assert x == pytest.approx(12.5) and y == pytest.approx(2.5)
    assert c.axes_at(b.x0 + 1, b.y0 + 1) == 0 and c.axes_at(1, 1) is None

    def broken(fig):
        raise ValueError("no data")

    with qtbot.waitSignal(c.rendered, timeout=20_000):
        c.plot(broken)
    assert "no data" in c.message and c.image() is None
    c.shutdown()


def test_duration_histogram_counts_whole_fixations_and_labels_the_overflow_bar():
    """Counts get whole-number ticks; the longest durations piled into the last bar are labelled with
    where that bar starts and how many it holds (they would otherwise read as fixations of that length)."""
    import numpy as np
    from matplotlib.figure import Figure

    from ui.results_view import draw_histogram

    frame_ms = 1000.0 / 30.0
    rng = np.random.default_rng(4)
    d = np.round(rng.gamma(4.0, 60.0, size=199) / frame_ms).clip(2) * frame_ms  # whole frames, 30 fps
    d = np.append(d, 40 * frame_ms)  # one far longer fixation, past the 99th percentile
    fig = Figure()
    assert draw_histogram(fig, d, "p01_s01, whole clip") == len(d)
    ax = fig.axes[0]
    assert ax.get_title() == f"Fixation durations, p01_s01, whole clip (n = {len(d)})"
    assert ax.get_ylabel() == "number of fixations" and ax.get_xlabel() == "fixation duration (ms)"
    fig.canvas.draw()
    ticks = [t for t in ax.get_yticks() if ax.get_ylim()[0] <= t <= ax.get_ylim()[1]]
    assert ticks and all(float(t).is_integer() for t in ticks)
    heights = [p.get_height() for p in ax.patches]
    assert sum(heights) == len(d)  # every fixation is in some bar, the overflow included
    label = [t.get_text() for t in ax.texts if t.get_text().startswith("last bar")]
    assert len(label) == 1
    start_ms = ax.patches[-1].get_x()
    over = int(np.count_nonzero(d >= start_ms))
    assert label[0] == f"last bar: {start_ms:.0f} ms or longer ({over})"
    assert heights[-1] == over
    # whole-ms durations on a 25-ms grid (a lab tracker's): durations on the last bar's left edge count too
    fig3 = Figure()
    grid = np.concatenate([np.full(50, 100.0), np.full(50, 150.0), [225.0, 225.0, 300.0]])
    draw_histogram(fig3, grid)
    ax3 = fig3.axes[0]
    lab = [t.get_text() for t in ax3.texts if t.get_text().startswith("last bar")]
    assert lab and lab[0].endswith(f"({int(ax3.patches[-1].get_height())})")
    # nothing beyond the axis: no label
    fig2 = Figure()
    draw_histogram(fig2, np.full(20, 200.0))
    assert not [t for t in fig2.axes[0].texts if t.get_text().startswith("last bar")]


@pytest.mark.parametrize("matrix", [[-65536, 0, 0, 0, 65536, 0, 0, 0, 1 << 30],  # mirrored left-right
                                    [0, 65536, 0, -65536, 0, 0, 0, 0, 1 << 30]])  # a quarter turn
def test_clip_view_shows_a_flagged_clip_as_processing_reads_it(qtbot, tmp_path, matrix):
    """The clip view once turned a left-right mirrored clip upside down (it read the mirror as a half turn)
    while processing read it right: both now go through one rule (``video.upright_rgb``)."""
    import numpy as np
    from _tagged_clips import tagged_clip

    from aspectus.webcam.video import iter_frames
    from ui.clip_view import FrameLoader

    clip = tagged_clip(tmp_path / "flagged.mp4", matrix=matrix)
    want = next(iter(iter_frames(clip))).image
    loader = FrameLoader()
    try:
        with qtbot.waitSignal(loader.frame_ready, timeout=20_000) as sig:
            loader.open(clip)
            loader.request(0.0)
        img = sig.args[1]
    finally:
        loader.close()
    assert img.shape == want.shape
    assert np.abs(img.astype(int) - want.astype(int)).max() <= 2
    if matrix[0] < 0:  # the mirror: white on the right, grey still on top
        assert img[:, -40:, 0].mean() > 200 and abs(img[:25, 60:100, 0].mean() - 128) < 20


def test_clip_view_noise_is_the_figure_the_verdict_reads(qtbot):
    """The quality panel's noise and the verdict's noise are one figure: the RMS over 33 ms steps (at 60 fps the
    per-sample RMS-S2S reads lower; it is named in the tooltip where it differs). A summary from before that
    figure existed shows its per-sample RMS-S2S, the same figure at 30 fps."""
    from _signals import same_eyes

    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.pipeline import summarise
    from ui.clip_view import ClipView

    smp = same_eyes(60, seconds=30.0)
    s = summarise(smp, run_analysis(smp), {})
    assert s["noise_rms_s2s_deg"] < 0.9 * s["noise_rms_s2s_33ms_deg"]  # the two differ at 60 fps
    view = ClipView()
    qtbot.addWidget(view)
    view.set_summary(s)
    shown = view.q_noise.text()
    assert shown == f"{s['noise_rms_s2s_33ms_deg']:.2f}°"
    assert f"noise {s['noise_rms_s2s_33ms_deg']:.2f} deg" in s["verdict"]
    assert f"Per sample (run.json's noise_rms_s2s_deg): {s['noise_rms_s2s_deg']:.2f}°" in view.q_noise.toolTip()
    old = {k: v for k, v in s.items() if k != "noise_rms_s2s_33ms_deg"}
    view.set_summary(old)
    assert view.q_noise.text() == f"{s['noise_rms_s2s_deg']:.2f}°" and "Per sample" not in view.q_noise.toolTip()
    # the tier's second figure, the SD within fixations, beside it as the verdict states it; "–" in runs from
    # before it was recorded
    view.set_summary(s)
    assert view.q_sd.text() == f"{s['noise_sd_deg']:.2f}°" and f"SD {s['noise_sd_deg']:.2f} deg" in s["verdict"]
    assert "√2" in view.q_sd.toolTip()
    view.set_summary({k: v for k, v in s.items() if k != "noise_sd_deg"})
    assert view.q_sd.text() == "–"


def test_clip_view_texts_never_cover_the_video_or_its_controls(qtbot):
    """With a long verdict, the iris line and a known-target check in a short pane (the clip view's share of a
    1366x768 window after a check), the texts under the video scroll instead of being drawn over the video and its
    controls (as they were: wrapped labels need a height for their width, which the splitter never asked for)."""
    from PySide6.QtWidgets import QApplication

    from ui.clip_view import ClipView

    view = ClipView()
    qtbot.addWidget(view)
    view.resize(640, 400)
    view.show()
    view.set_summary({"face_found_frac": 1.0, "blink_count": 4, "noise_rms_s2s_33ms_deg": 1.16, "noise_sd_deg": 1.12,
                      "median_distance_mm": 613.0, "valid_frac": 0.95, "usable": True,
                      "verdict": "Usable: " + "a long verdict that wraps over several lines. " * 12})
    view.set_iris_estimate("Iris height from: the eye's appearance (chosen automatically: the iris is 16.1 px across, "
                           "below 16.8 px).")
    view.targets_info.setText("<b>Known-target check:</b> " + "<br>".join(f"line {i} of the check" for i in range(6)))
    view.targets_info.show()
    for _ in range(3):
        QApplication.processEvents()
    pic, slider, pane = view.picture.geometry(), view.slider.geometry(), view.text_pane.geometry()
    assert pic.height() >= view.picture.minimumHeight()
    assert pic.bottom() < slider.top() and slider.bottom() < pane.top(), (pic, slider, pane)
    assert pane.bottom() <= view.contentsRect().bottom() + 1
    assert view.text_pane.verticalScrollBar().maximum() > 0  # the rest is reached by scrolling
    # the two precision figures are named as the verdict names them, and each caption fits
    for name in ("Noise, sample to sample", "SD within fixations"):
        cap = view.quality_captions[name]
        assert cap.fontMetrics().horizontalAdvance(cap.text()) <= cap.contentsRect().width() + 1, name
    # with room to spare, nothing scrolls
    view.set_target_check(None)
    view.set_summary({"verdict": "Usable: short.", "usable": True})
    view.resize(640, 700)
    for _ in range(3):
        QApplication.processEvents()
    assert view.text_pane.verticalScrollBar().maximum() == 0


def test_guide_and_tooltips_explain_the_two_precision_figures_with_the_verdicts_limits(qtbot):
    """The user guide and the quality panel's tooltips name the two figures as the panel does, in degrees, and give
    the limits the verdict applies, read from the library's tiers (PRECISION_TIERS), not copied."""
    from aspectus.webcam.pipeline import PRECISION_TIERS, tier_sd_limit_deg
    from ui.clip_view import ClipView
    from ui.guide import GuideDialog

    g = GuideDialog()
    qtbot.addWidget(g)
    text = " ".join(g.browser.toPlainText().split())
    view = ClipView()
    qtbot.addWidget(view)
    view.set_summary({"noise_rms_s2s_33ms_deg": 1.16, "noise_sd_deg": 1.12})
    tips = [" ".join(t.split()) for t in (view.q_noise.toolTip(), view.q_sd.toolTip())]
    assert "{" not in text
    for name in ("Noise, sample to sample", "SD within fixations"):
        assert name in text and name in view.quality_captions
    assert "degrees of visual angle" in text and all("degrees of visual angle" in t for t in tips)
    for tier, max_noise, min_iris, _ in PRECISION_TIERS[:2]:
        for words in (f"at most {max_noise:g} deg between samples 33 ms apart",
                      f"SD within fixations of at most {tier_sd_limit_deg(max_noise):.2f} deg",
                      f"irises at least {min_iris:g} px across"):
            assert words in text, (tier, words)
            assert all(words in t for t in tips), (tier, words)


def test_features_table_counts_as_counts_rates_with_decimals_and_the_precision_caveat(qtbot):
    """Whole-number rates read as counts beside the same column's decimals ("192" over "204.0"); and clips whose
    precision tier does not support fixation counts and durations (aspectus.webcam.pipeline.PRECISION_TIERS) are
    named above the table."""
    import pandas as pd
    from PySide6.QtCore import Qt

    from aspectus.webcam.pipeline import PRECISION_TIERS
    from ui.results_view import DataFrameModel, precision_caveat

    m = DataFrameModel(pd.DataFrame({"fixation_count": [32.0, 34.0], "fixation_rate_per_min": [192.0, 204.0],
                                     "frames": [600.0, 360.0]}))
    m.human_headers = True
    shown = [[m.data(m.index(r, c), Qt.DisplayRole) for c in range(3)] for r in range(2)]
    assert shown == [["32", "192.0", "600"], ["34", "204.0", "360"]]
    # the columns that say which time span a row covers read as words, with a definition of their own (the
    # feature table's n_samples read "N samples", with the events table's definition as its tooltip)
    spans = DataFrameModel(pd.DataFrame({"scope": ["clip"], "start_s": [-0.017], "n_samples": [600]}))
    spans.human_headers = True
    heads = [spans.headerData(c, Qt.Horizontal, Qt.DisplayRole) for c in range(3)]
    assert heads == ["Scope", "Start (s)", "Samples"]
    tip = spans.headerData(2, Qt.Horizontal, Qt.ToolTipRole)
    assert "time span" in tip and "event" not in tip

    without = [t for t, _, _, features in PRECISION_TIERS if "fixation count and durations" not in features]
    assert without == ["coarse", "minimal"]
    clips = [("p01", None, {"precision_tier": "coarse"}), ("p02", None, {"precision_tier": "events"}),
             ("p03", None, {})]
    note = precision_caveat(clips)
    assert "p01" in note and "p02" not in note and "p03" not in note and "fixation counts and durations" in note
    assert precision_caveat(clips[1:]) == ""


def test_the_bland_altman_title_prints_its_three_figures_alike():
    # the app's validation plot read "Bias -0.8, limits -2.35 to 0.746" (three figures, three precisions)
    from ui.validation_view import _same_decimals

    assert _same_decimals(-0.8, -2.35, 0.746) == ["-0.80", "-2.35", "0.75"]
    assert _same_decimals(31.2, -60.4, 122.3) == ["31", "-60", "122"]
    assert _same_decimals(0.0, -1e-15, 1e-15) == ["0.00", "0.00", "0.00"]  # no "-0.00"


def test_the_validation_feature_names_say_their_scope_once():
    # the chooser read "Fixations (per window) – per window (n = 10)"
    from aspectus.validation.report import feature_label
    from ui.validation_view import _scoped_label

    assert _scoped_label(feature_label("fixation_count", scope="window"), "window") == "Fixations (per window)"
    assert _scoped_label(feature_label("blink_rate_per_min", scope="segment"), "segment") == \
        "Blink rate (1/min), per segment"


def test_clip_list_says_partly_usable_for_a_clip_too_unsteady_for_fixation_measures(qtbot, tmp_path):
    """The Usable column reads the verdict in one word (aspectus.webcam.pipeline.usable_word): a clip whose precision
    tier does not support fixation counts and durations is "partly", not "yes", and the word fits its column; the
    clip view shows such a verdict in amber, not in the green of a clip usable for everything."""
    from PySide6.QtCore import Qt

    from aspectus.studies import project as study_mod
    from ui.main_window import COL_USABLE

    d = tmp_path / "study"
    d.mkdir()
    s = study_mod.new_study(path=d / "pilot.aspectus-study.json", name="Linden Brook reading pilot")
    for stem in ("p01_s01", "p02_s01", "p03_s01"):
        (d / f"{stem}.mp4").write_bytes(b"\0" * 64)  # never decoded here
        s.add_clip(d / f"{stem}.mp4")
    s.save()
    w = shown_window(qtbot, "thread")
    try:
        assert w.open_study(s.path)
        summaries = {"p01_s01": {"usable": True, "precision_tier": "coarse",
                                 "verdict": "Partly usable: face tracked in 100% of frames."},
                     "p02_s01": {"usable": True, "precision_tier": "events", "verdict": "Usable: fine."},
                     "p03_s01": {"usable": False, "precision_tier": "minimal", "verdict": "Not usable: too dark."}}
        for c in w.study.clips:
            c.summary = summaries[c.stem]
        w._refresh_list()
        col = {w.clip_list.topLevelItem(i).data(0, Qt.UserRole): w.clip_list.topLevelItem(i).text(COL_USABLE)
               for i in range(w.clip_list.topLevelItemCount())}
        assert col == {"p01_s01": "partly", "p02_s01": "yes", "p03_s01": "no"}
        fm = w.clip_list.fontMetrics()
        assert fm.horizontalAdvance("partly") + 8 <= w.clip_list.columnWidth(COL_USABLE)
        assert "partly" in w.clip_list.headerItem().toolTip(COL_USABLE)
        w.clip_view.set_summary(summaries["p01_s01"])
        assert w.clip_view.verdict.text().startswith("<b>Partly usable:</b>")
        assert "#b26a00" in w.clip_view.verdict.styleSheet()
        w.clip_view.set_summary(summaries["p02_s01"])
        assert "#2e7d32" in w.clip_view.verdict.styleSheet()
    finally:
        w.shutdown()


def test_params_panel_labels_do_not_repeat_their_unit_and_the_thresholds_bounds_stand_together(qtbot):
    """A label says what a value is and the box its unit ("Adapted threshold" | "3.5 × noise"), not both
    ("… noise ×" | "3.5 × noise"); the two lower bounds of the adapted I-DT threshold are shown one under the other,
    right after the threshold they bound, so that their "… but at least" / "… and at least" read on from it."""
    from PySide6.QtWidgets import QFormLayout

    from ui.params_panel import ParamsPanel

    panel = ParamsPanel()
    qtbot.addWidget(panel)
    for name, spec in panel._specs.items():
        text = panel._labels[name].text()
        assert not text.rstrip().endswith("×"), (name, text)
        if spec.unit.strip("× ") and len(spec.unit) > 1:
            assert spec.unit.strip("× ") not in text, (name, text, spec.unit)
    form = panel._groups["idt"].layout()
    rows = [form.itemAt(i, QFormLayout.LabelRole).widget().objectName() for i in range(form.rowCount())]
    at = rows.index("param_label_idt_noise_factor")
    assert rows[at:at + 3] == ["param_label_idt_noise_factor", "param_label_idt_min_dispersion_deg",
                               "param_label_idt_noise_range_factor"], rows


def test_the_parameters_panel_names_the_segments_file_and_its_segments(qtbot, tmp_path):
    """Task segments of this clip: the file's name and the segments it holds (not a path climbing out of the study's
    folder), the path in the tooltip, and a file that cannot be read says why."""
    from ui.main_window import segments_summary
    from ui.params_panel import ParamsPanel

    f = tmp_path / "segments_p01_s01.csv"
    f.write_text("label,onset_s,offset_s\npassage_1,0,8\npassage_2,8,15\nquestions,15,20\n")
    assert segments_summary(f) == "segments_p01_s01.csv: 3 segments (passage_1, passage_2, questions)"
    f.write_text("label,onset_s,offset_s\n" + "".join(f"page_{i},{i},{i + 1}\n" for i in range(6)))
    assert segments_summary(f) == "segments_p01_s01.csv: 6 segments (page_0, page_1, page_2, page_3, … 2 more)"
    f.write_text("label,start,end\nx,0,1\n")
    text = segments_summary(f)
    assert text.startswith("segments_p01_s01.csv: cannot be read - ") and "onset_s" in text, text
    assert segments_summary(tmp_path / "gone.csv").startswith("gone.csv: cannot be read - ")
    panel = ParamsPanel()
    qtbot.addWidget(panel)
    panel.set_segments_text("segments_p01_s01.csv: 1 segment (reading)", tooltip="../segs/segments_p01_s01.csv")
    assert panel.segments_label.toolTip() == "../segs/segments_p01_s01.csv" and panel.segments_clear.isEnabled()


def test_the_guide_names_the_mirrored_choice_and_the_usable_words_as_the_app_shows_them():
    """The guide's words for the mirrored-recording choice are the panel's own (aspectus.webcam.gaze.GAZE_CHOICES),
    and its words for the clip list's Usable column are those usable_word gives."""
    from aspectus.webcam.gaze import GAZE_CHOICE_OF
    from ui.guide import guide_html

    text = guide_html()
    c = GAZE_CHOICE_OF["mirrored"]
    assert f"<i>{c.label}</i>" in text
    shown = [t for v, t, _ in c.options if v is True][0]
    assert f"<i>{shown}</i>" in text.replace("\n", " ")
    for word in ("yes", "partly", "no"):
        assert f"<i>{word}</i>" in text


def test_the_gaze_trace_says_which_way_is_positive_and_its_labels_fit():
    """The trace's axes name the sign convention of aspectus.schema (yaw > 0: the student's right; pitch > 0: up),
    and the two-line labels stay inside the figure at the app's trace size (about 640 x 230 px)."""
    import matplotlib

    matplotlib.use("Agg")
    import numpy as np
    import pandas as pd
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from aspectus.schema import column
    from ui.time_view import TraceData, draw_trace

    assert "right" in column("yaw_deg").doc and "up" in column("pitch_deg").doc
    t = np.arange(300) / 30.0
    s = pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": 8 * np.sin(t), "pitch_deg": 4 * np.cos(t)})
    fig = Figure(figsize=(6.4, 2.3), dpi=100)
    FigureCanvasAgg(fig)
    draw_trace(fig, TraceData.from_frames(s, None, None), (0.0, 10.0))
    fig.canvas.draw()
    ax_y, ax_p = fig.axes[:2]
    assert ax_y.get_ylabel() == "yaw (°)\n+ right" and ax_p.get_ylabel() == "pitch (°)\n+ up"
    renderer = fig.canvas.get_renderer()
    for ax in (ax_y, ax_p):
        box = ax.yaxis.label.get_window_extent(renderer)
        assert box.x0 >= 0 and box.y0 >= 0 and box.y1 <= fig.bbox.height, (ax.get_ylabel(), box)
