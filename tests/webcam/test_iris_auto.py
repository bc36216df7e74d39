"""The default ``GazeParams(iris_combine="auto")``: the appearance estimate of the iris height at every iris size,
the limbus fit wherever the appearance estimate cannot run, recorded in run.json; and the clip's iris size, which
``eye_anchor_set="auto"`` still decides on (aspectus.webcam.gaze.SMALL_FACE_BELOW_PX).

Until 2026-12-05 ``iris_combine="auto"`` switched to the limbus fit at 16.8 px of the limbus fit's diameter (the
geometric middle of 12 and 25 px of true iris, 17.3 px, on the fit's scale); on area-drawn irises of 25-50 px the
appearance estimate read lower noise on every draw (docs/notes/gaze-measurement.md, "The appearance estimate on
large faces"). The clips here are rendered (aspectus.synth) at 640 x 360 at 60 cm (about 11 px) and 1280 x 720 at
60 cm (about 22 px). The sizes read are the limbus fit's, as the pipeline reads them (the face mesh's with too few
fits): aspectus.webcam.gaze.switch_iris_px.
"""
from __future__ import annotations

import json

import numpy as np
import pytest


def _choice(out_dir, clip):
    run = json.loads((out_dir / clip.stem / "run.json").read_text())
    return run["extraction"]["gaze_model"], run["params"]["gaze"]


def test_the_default_is_auto_and_the_setting_is_checked():
    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, GazeParams

    assert GazeParams().iris_combine == "auto"
    # the small-face size the anchor set decides on: between the 12 and 25 px where it was set
    assert 12.0 < SMALL_FACE_BELOW_PX < 25.0
    # "auto" needs nothing: it falls back; "appearance" asked for explicitly still needs its inputs
    assert GazeParams(iris_combine="auto", refine_iris=False).iris_combine == "auto"
    assert GazeParams(iris_combine="auto", eye_anchors=False).iris_combine == "auto"
    with pytest.raises(ParameterError, match="needs refine_iris and eye_anchors"):
        GazeParams(iris_combine="appearance", refine_iris=False)
    with pytest.raises(ParameterError, match="auto, limbus, rescale, fuse, appearance"):
        GazeParams(iris_combine="automatic")
    for v in ("limbus", "rescale", "fuse", "appearance"):
        assert GazeParams(iris_combine=v).iris_combine == v


def test_patch_file_gives_back_the_rows_in_blocks(tmp_path):
    from aspectus.webcam.iris_appearance import PATCH_BYTES, PATCH_SIZE
    from aspectus.webcam.pipeline import _PatchFile

    rng = np.random.default_rng(3)
    rows = rng.integers(0, 256, size=(2500, PATCH_BYTES), dtype=np.uint8)
    f = _PatchFile(PATCH_BYTES)
    for r in rows:
        f.append(r)
    W, H = PATCH_SIZE
    assert len(f) == 2500
    assert np.array_equal(f[1000:2100], rows[1000:2100].reshape(-1, 2, H, W))
    assert np.array_equal(f[2400:2500], rows[2400:].reshape(-1, 2, H, W))  # rows still in the write buffer
    f.close()


# The switch reads the limbus fit's median diameter over open-eye frames: on 24 rendered dark-iris clips it read
# 0.948-0.991 of the renderer's iris, the face mesh 0.994-1.064, and the mesh's was inflated by the screen's
# reflection on the corneas and by lids that do not follow the gaze - on the 16.6 px lids-still grid cell truth
# 16.55 px, mesh 17.35, fit 15.97 (docs/notes/gaze-measurement.md, "The auto switch read on the limbus fit's
# diameter"). The sizes below are those three figures.
_TRUE, _MESH, _FIT = 16.55, 17.35, 15.97


def _clip_rows(n=200, mesh=_MESH, fit=_FIT):
    found = np.ones(n, bool)
    found[:10] = False
    ear = np.full((n, 2), 0.30)
    ear[20:60] = 0.08  # closed lids: the fit's circle there is not the iris (made large here) and is left out
    lim = np.full((n, 2), fit)
    lim[20:60] = 30.0
    lim[:10] = 30.0  # no face: left out
    return found, np.full((n, 2), mesh), lim, ear


def test_the_clip_iris_size_is_the_limbus_fits_over_open_eyes_and_the_mesh_with_too_few_fits():
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, MIN_SCALE_FITS, switch_iris_px
    from aspectus.webcam.iris_appearance import small_iris

    assert _FIT < SMALL_FACE_BELOW_PX <= _MESH and _TRUE < SMALL_FACE_BELOW_PX
    found, mesh, lim, ear = _clip_rows()
    small, size = small_iris(found, mesh, lim, ear, SMALL_FACE_BELOW_PX)
    assert small  # the face mesh's 17.35 px alone took the limbus fit
    assert size == {"iris_px": pytest.approx(_FIT), "iris_px_source": "limbus fit", "limbus_fits": 2 * 150,
                    "mesh_iris_px": pytest.approx(_MESH)}
    # the other way round: a mesh below the threshold and fits above it take the limbus fit
    assert not small_iris(*_clip_rows(mesh=16.9, fit=17.6), SMALL_FACE_BELOW_PX)[0]
    # fewer than MIN_SCALE_FITS (30) open-eye fits, both eyes counted: the face mesh's size, as the iris scale
    # falls back (gaze.limbus_iris_scale)
    assert MIN_SCALE_FITS == 30
    few = np.full_like(lim, np.nan)
    few[100:114] = _FIT  # 28 fits
    small, size = small_iris(found, mesh, few, ear, SMALL_FACE_BELOW_PX)
    assert not small and size["iris_px_source"] == "face mesh" and size["limbus_fits"] == 28
    assert size["iris_px"] == pytest.approx(_MESH)
    few[114] = _FIT  # 30
    assert small_iris(found, mesh, few, ear, SMALL_FACE_BELOW_PX)[1]["iris_px_source"] == "limbus fit"
    # no limbus fits at all (refine_iris off), no face: the mesh's size, or none
    assert switch_iris_px(found, mesh, None, ear)["iris_px"] == pytest.approx(_MESH)
    none = switch_iris_px(np.zeros(5, bool), np.full((5, 2), np.nan), np.full((5, 2), np.nan), np.full((5, 2), 0.3))
    assert np.isnan(none["iris_px"]) and not small_iris(np.zeros(5, bool), np.full((5, 2), np.nan), None,
                                                        np.full((5, 2), 0.3), SMALL_FACE_BELOW_PX)[0]


def _record_rows(n, mesh, fit, width):
    from aspectus.webcam.frame_geometry import LIMBUS_DIAM

    rows = np.zeros((n, width))
    rows[:, 1] = 1.0
    rows[:, 19:21] = mesh
    rows[:, LIMBUS_DIAM] = fit
    rows[:, 29:31] = 0.3
    return rows


def test_the_eye_patches_are_kept_on_every_frame_whatever_the_iris_size():
    """The pipeline keeps every row's patches (pipeline._SplitSink): small and large irises alike, since the
    appearance estimate is the default at every size."""
    from aspectus.webcam.frame_geometry import RECORD_WIDTH
    from aspectus.webcam.iris_appearance import PATCH_BYTES
    from aspectus.webcam.pipeline import AUTO_DECIDE_FRAMES, _Grow, _PatchFile, _SplitSink

    width = RECORD_WIDTH + 2
    n = AUTO_DECIDE_FRAMES + 50
    for mesh, fit in ((_MESH, _FIT), (16.9, 17.6), (26.0, 25.0)):
        patches = _PatchFile(PATCH_BYTES)
        rec = _Grow(width)
        sink = _SplitSink(rec, patches, width)
        rows = _record_rows(n, mesh, fit, width + PATCH_BYTES // 8)
        rows[:, width:] = np.arange(n)[:, None]  # each row's patch bytes differ
        for row in rows:
            sink(row)
        assert len(patches) == n and len(rec.view()) == n, (mesh, fit)
        assert np.array_equal(rec.view(), rows[:, :width])
        assert np.array_equal(patches[n - 3:n].reshape(3, -1).view(np.float64), rows[n - 3:, width:])
        patches.close()


@pytest.mark.parametrize("side_arcs", [False, True])
def test_the_geometry_decides_on_the_first_frames_limbus_fits_whatever_the_batches(monkeypatch, side_arcs):
    """The per-frame geometry's decision (``anchor_set="auto"``: a small face) reads the limbus fits of the first
    DECIDE_FRAMES frames with a face and acts from the next frame on, however the frames come in batches (the
    thread runner takes what is queued). With ``side_arcs`` (both fits made, the appearance estimate learning from
    those without the rule) it reads the fits without the side-arc rule, on which the size rule was measured
    (frame_geometry.decision_limbus_diam); the fits with it are given a diameter on the other side of the
    threshold here."""
    from aspectus.webcam import frame_geometry as fg
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX

    def run(mesh, fit, batches):
        geo = fg.FrameGeometry(fov_deg=60.0, refine_iris=True, anchor_set="auto", appearance=True,
                               side_arcs=side_arcs)
        seen = []

        def row_before_iris(pts_s, size_px, points_px, face_count, eyes=None, eyes_origin_px=(0, 0)):
            seen.append(geo.small_face)
            row = np.full(geo.width, np.nan)
            row[0], row[1], row[2] = pts_s, float(points_px is not None), face_count
            if points_px is None:
                return row, None
            row[19:21], row[29:31] = mesh, 0.3
            iris = np.array([[100.0, 100.0], [160.0, 100.0]])
            return row, ((None, None, iris, np.full(2, mesh)), np.zeros(2))

        def fits(jobs, variants, **kw):
            other = 2 * SMALL_FACE_BELOW_PX - fit  # the side-arc fits' diameter: across the threshold

            def one(job, d):
                return job[2], np.ones(2, bool), np.full(2, d), np.full(2, 50.0)
            return ([one(j, fit) if v in ("plain", "both") else None for j, v in zip(jobs, variants)],
                    [one(j, other) if v in ("side", "both") else None for j, v in zip(jobs, variants)])

        monkeypatch.setattr(geo, "_row_before_iris", row_before_iris)
        monkeypatch.setattr(fg, "limbus_centres_variants", fits)
        k = 0
        for b in batches:  # frame 3 has no face: the 150th face frame is frame 150
            geo.rows([(k + j, (640, 480), None if k + j == 3 else np.zeros((478, 3)), 1) for j in range(b)])
            k += b
        return seen, geo.state()["small_face"]

    n = fg.DECIDE_FRAMES + 40
    for mesh, fit, small in ((_MESH, _FIT, True), (16.9, 17.6, False)):
        seen, small_face = run(mesh, fit, [16] * (n // 16) + [n % 16])
        assert small_face is small
        assert seen[:fg.DECIDE_FRAMES + 1] == [None] * (fg.DECIDE_FRAMES + 1)
        assert seen[fg.DECIDE_FRAMES + 1:] == [small] * (n - fg.DECIDE_FRAMES - 1)
        assert run(mesh, fit, [5, 1, 30, 120, 7, 16, 1, 10])[0] == seen


@pytest.mark.slow
def test_auto_takes_the_appearance_estimate_on_a_small_iris(rendered_clip, tmp_path):
    from aspectus.webcam.pipeline import process_clip

    clip = rendered_clip(duration_s=10.0, seed=21, size_px=(640, 360), name="p21_s01.mp4").path
    process_clip(clip, tmp_path / clip.stem)
    gm, gaze = _choice(tmp_path, clip)
    c = gm["iris_estimate"]
    assert gaze["iris_combine"] == "auto"
    assert c["used"] == "appearance", c
    assert "threshold_px" not in c  # no size threshold decides it
    assert c["iris_px_source"] == "limbus fit" and c["limbus_fits"] >= 30
    assert 9.0 <= c["iris_px"] <= 13.0  # 11.7 mm at 60 cm through a 60 deg lens 640 px wide: 10.8 px
    # the whole clip's figure is the iris scale's limbus median (the same frames, the same rule)
    assert c["iris_px"] == pytest.approx(gm["iris_scale"]["limbus_median_px"], abs=0.01)
    assert 9.0 <= c["mesh_median_iris_px"] <= 13.0
    assert c["reason"] == "the appearance estimate was fitted on the clip's own eyes"
    assert any(gm["iris_appearance"]["blocks"][0][e]["fitted"] for e in ("right", "left"))
    run = json.loads((tmp_path / clip.stem / "run.json").read_text())
    verdict = run["quality"]["verdict"]
    assert "circle fitted" not in verdict  # the default method needs no sentence (the fallback has one)
    # a short clip (9.2 s here) short of the finest tier gets the advice to process whole recordings, no more
    assert c["learnt_from_s"] <= run["quality"]["duration_s"]
    finest = run["quality"]["precision_tier"] == "events"
    assert ("learnt from only" in verdict) == (not finest), verdict


@pytest.mark.slow
def test_auto_takes_the_appearance_estimate_on_a_large_iris_too(rendered_clip, tmp_path):
    from aspectus.webcam.pipeline import process_clip

    clip = rendered_clip(duration_s=6.0, seed=22, size_px=(1280, 720), name="p22_s01.mp4").path
    process_clip(clip, tmp_path / clip.stem)
    gm, _ = _choice(tmp_path, clip)
    c = gm["iris_estimate"]
    assert c["used"] == "appearance", c
    assert 19.0 <= c["iris_px"] <= 25.0 and c["iris_px_source"] == "limbus fit"  # 11.7 mm at 60 cm: 21.6 px
    assert any(gm["iris_appearance"]["blocks"][0][e]["fitted"] for e in ("right", "left"))
    assert "circle fitted" not in json.loads((tmp_path / clip.stem / "run.json").read_text())["quality"]["verdict"]
    # the anchor set still decides by the size: a large face is placed by the points below the eyes
    assert gm["eye_anchor_set"]["used"] == "below", gm["eye_anchor_set"]


@pytest.mark.slow
def test_auto_falls_back_to_the_limbus_fit_where_appearance_cannot_run(rendered_clip, tmp_path):
    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples, summarise

    # 3 s at about 11 px: the regression needs 150 open-eye frames with a limbus fit per eye, and 90 are recorded
    clip = rendered_clip(duration_s=3.0, seed=23, size_px=(640, 360), name="p23_s01.mp4").path
    s_auto, meta = extract_samples(clip)
    c = meta["gaze_model"]["iris_estimate"]
    assert c["used"] == "limbus" and "not fitted" in c["reason"], c
    assert "circle fitted to the iris edge" in summarise(s_auto, run_analysis(s_auto), meta)["verdict"]
    assert "iris_appearance" not in meta["gaze_model"]
    # the fits the appearance estimate would have learnt from: without the side-arc rule
    s_limbus, _ = extract_samples(clip, params=ProcessParams(gaze=GazeParams(iris_combine="limbus", side_arcs=False)))
    np.testing.assert_allclose(s_auto["pitch_deg"], s_limbus["pitch_deg"], equal_nan=True)
    # without the eye picture (refine_iris off) it falls back without an error and says why
    _, meta = extract_samples(clip, params=ProcessParams(gaze=GazeParams(refine_iris=False)))
    c = meta["gaze_model"]["iris_estimate"]
    assert c["used"] == "face mesh" and "refine_iris" in c["reason"], c


@pytest.mark.slow
def test_on_a_large_iris_the_geometry_samples_patches_on_every_face_frame(rendered_clip, monkeypatch):
    """Patches are sampled past the first frames on a large face too; in a child process (the arguments passed
    on) the samples are the same as in a thread."""
    from aspectus.webcam import iris_appearance
    from aspectus.webcam.pipeline import AUTO_DECIDE_FRAMES, extract_samples

    clip = rendered_clip(duration_s=6.0, seed=22, size_px=(1280, 720), name="p22_s01.mp4").path
    calls = []
    orig = iris_appearance.EyePatchSampler.sample

    def counting(self, *a, **kw):
        calls.append(1)
        return orig(self, *a, **kw)

    monkeypatch.setattr(iris_appearance.EyePatchSampler, "sample", counting)
    s_thread, meta = extract_samples(clip, geometry_mode="thread")
    assert meta["gaze_model"]["iris_estimate"]["used"] == "appearance"
    assert AUTO_DECIDE_FRAMES < len(calls) and len(calls) >= 0.95 * len(s_thread)
    s_proc, meta = extract_samples(clip, geometry_mode="process")
    assert meta["geometry_ran_in"] == "process" and meta["gaze_model"]["iris_estimate"]["used"] == "appearance"
    np.testing.assert_allclose(s_proc["pitch_deg"], s_thread["pitch_deg"], equal_nan=True)


def test_the_threshold_set_on_true_sizes_is_applied_on_the_limbus_fits_scale():
    """sqrt(12 x 25) = 17.3 px was set on the renderer's true iris sizes; the small-face rule reads the limbus fit,
    which reads below the truth (median 0.969 of it over the seed-0 gaze grid's 24 cells,
    gaze.LIMBUS_FIT_PER_TRUE_IRIS), so the threshold is 17.3 x 0.969 = 16.8 px of the fit's diameter. A clip whose
    fit reads between the two is not a small face (it would have been against 17.3 px)."""
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, LIMBUS_FIT_PER_TRUE_IRIS
    from aspectus.webcam.iris_appearance import small_iris

    assert 0.9 < LIMBUS_FIT_PER_TRUE_IRIS < 1.0  # the fit reads a few per cent below the truth
    assert SMALL_FACE_BELOW_PX == round(float(np.sqrt(12.0 * 25.0)) * LIMBUS_FIT_PER_TRUE_IRIS, 1) == 16.8
    true_threshold = round(float(np.sqrt(12.0 * 25.0)), 1)
    assert true_threshold == 17.3
    for fit in (16.8, 17.0, 17.25):  # between the fit-scale and the true-scale thresholds
        small, size = small_iris(*_clip_rows(mesh=fit, fit=fit), SMALL_FACE_BELOW_PX)
        assert size["iris_px_source"] == "limbus fit" and size["iris_px"] == pytest.approx(fit)
        assert not small, fit
        assert small_iris(*_clip_rows(mesh=fit, fit=fit), true_threshold)[0]  # what 17.3 px would have chosen
    # just below the threshold: a small face
    assert small_iris(*_clip_rows(mesh=17.0, fit=16.75), SMALL_FACE_BELOW_PX)[0]
    # the end-to-end validation clip's fit (15.9 px) and the largest grid cell's below (16.13 px) stay below it
    for fit in (15.9, 16.13):
        assert small_iris(*_clip_rows(fit=fit), SMALL_FACE_BELOW_PX)[0]


def test_the_plain_words_say_how_the_height_was_read_and_name_an_old_runs_threshold():
    from aspectus.webcam.gaze import describe_iris_estimate

    assert describe_iris_estimate({"setting": "auto", "used": "appearance", "iris_px": 24.9,
                                   "iris_px_source": "limbus fit"}) == \
        "Iris height from: the eye's appearance (chosen automatically)."
    text = describe_iris_estimate({"setting": "auto", "used": "limbus", "reason": "the appearance estimate carried "
                                   "no weight (on every eye the limbus fit alone agreed better with the other eye)"})
    assert text == ("Iris height from: circle fit to the iris edge (chosen automatically: the eye's appearance agreed "
                    "less between the two eyes than the circle fit did).")
    # a run.json from before 2026-12-05 records the threshold "auto" chose by; the size names its measure (the
    # verdict's iris size is the face tracker's, which reads larger)
    text = describe_iris_estimate({"setting": "auto", "used": "limbus", "iris_px": 17.0,
                                   "iris_px_source": "limbus fit", "threshold_px": 16.8})
    assert text == ("Iris height from: circle fit to the iris edge (chosen automatically: the circle fit measures "
                    "the iris 17 px across, not below 16.8 px).")
