"""Privacy by default: exports hold no pictures, previews blur faces, per-frame data can be deleted.

Blurring is measured, not assumed: the high-frequency energy (variance of the
Laplacian) of the face region must drop to a small fraction of the unblurred
frame's. A recognisable face has strong edges (eyes, brows, mouth); the
mosaic-and-smooth of :func:`aspectus.webcam.overlay.blur_region` leaves almost none.
"""
from __future__ import annotations

import base64
import io
import json
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus._env import import_cv2

REPO = Path(__file__).resolve().parents[2]
SAMPLE_CLIPS = REPO / "sample_clips"
#: the face region must keep less than this share of its high-frequency energy (common practice for this
#: measure: a blur that removes identity removes well over 90 % of it)
MAX_HF_SHARE = 0.1


def hf_energy(img: np.ndarray, box=None) -> float:
    """Variance of the Laplacian of the grey picture (inside ``box`` = x0, y0, x1, y1 px)."""
    cv2 = import_cv2()
    if box is not None:
        x0, y0, x1, y1 = (int(v) for v in box)
        img = img[y0:y1, x0:x1]
    g = cv2.cvtColor(np.ascontiguousarray(img), cv2.COLOR_RGB2GRAY).astype(np.float64)
    return float(cv2.Laplacian(g, cv2.CV_64F).var())


@pytest.fixture(scope="module")
def faces_clip(tmp_path_factory):
    """A short clip of a subject and one bystander, 640x360, noise-free so the energy measure is about faces."""
    from aspectus.synth.render import render_clip, synth_trajectory

    d = tmp_path_factory.mktemp("privacy")
    tr = synth_trajectory(duration_s=1.0 + 1 / 60, seed=31)
    return render_clip(d / "linden_brook_p01_s01.mp4", tr, size_px=(640, 360), noise_sd=0.0, extra_faces=1,
                       seed=31).path


@pytest.fixture(scope="module")
def frame(faces_clip) -> np.ndarray:
    from aspectus.webcam.video import read_frame_at

    return read_frame_at(faces_clip, 0.3).image


@pytest.fixture(scope="module")
def face_boxes(frame):
    from aspectus.privacy.blur import find_face_boxes

    boxes = find_face_boxes(frame)
    assert len(boxes) >= 2, f"the detector should find the subject and the bystander, found {boxes}"
    return boxes


# --- previews and overlays -------------------------------------------------------------------

def test_overlay_blurs_the_face_by_default(frame):
    from aspectus.webcam.overlay import FrameLandmarker, draw_overlay, face_box_from_landmarks

    lm = FrameLandmarker()
    try:
        pts = lm(frame)
    finally:
        lm.close()
    assert pts is not None
    box = face_box_from_landmarks(pts, shape=frame.shape[:2])
    raw = hf_energy(frame, box)
    assert raw > 20  # the unblurred face has edges to lose
    blurred = draw_overlay(frame, landmarks_px=pts, show_mesh=False)
    assert hf_energy(blurred, box) < MAX_HF_SHARE * raw
    shown = draw_overlay(frame, landmarks_px=pts, show_mesh=False, blur=False)
    assert hf_energy(shown, box) == pytest.approx(raw, rel=0.05)
    # no face position known and none found by the caller: the whole picture is blurred rather than risk a face
    whole = draw_overlay(frame, show_mesh=False, face_boxes=[])
    assert hf_energy(whole) < MAX_HF_SHARE * hf_energy(frame)


def test_saved_preview_blurs_every_face(frame, face_boxes, tmp_path):
    from aspectus.privacy.blur import save_preview_image

    cv2 = import_cv2()
    p = save_preview_image(tmp_path / "preview.png", frame)
    back = cv2.cvtColor(cv2.imread(str(p)), cv2.COLOR_BGR2RGB)
    assert back.shape == frame.shape
    for box in face_boxes:  # the subject and the bystander
        assert hf_energy(back, box) < MAX_HF_SHARE * hf_energy(frame, box), box
    # the rest of the picture is left as it was
    mask = np.ones(frame.shape[:2], bool)
    for x0, y0, x1, y1 in face_boxes:
        mask[y0:y1, x0:x1] = False
    assert np.abs(back.astype(int) - frame.astype(int))[mask].mean() < 1.0
    # only an explicit choice writes faces as they are
    p2 = save_preview_image(tmp_path / "faces.png", frame, blur_faces=False)
    assert np.array_equal(cv2.cvtColor(cv2.imread(str(p2)), cv2.COLOR_BGR2RGB), frame)


def test_preview_without_a_detectable_face_is_blurred_whole(tmp_path):
    from aspectus.privacy.blur import blur_faces

    rng = np.random.default_rng(0)
    img = (rng.random((120, 160, 3)) * 255).astype(np.uint8)
    out = blur_faces(img)
    assert hf_energy(out) < MAX_HF_SHARE * hf_energy(img)


def test_preview_rejects_unknown_picture_formats(frame, tmp_path):
    from aspectus.errors import AspectusInputError
    from aspectus.privacy.blur import save_preview_image

    with pytest.raises(AspectusInputError, match=r"preview\.gif.*\.gif"):
        save_preview_image(tmp_path / "preview.gif", frame)
    assert not (tmp_path / "preview.gif").exists()


@pytest.mark.gui
@pytest.mark.timeout(120)
def test_clip_view_shows_faces_blurred_unless_unticked(qtbot, faces_clip, frame, face_boxes):
    """The app's clip view (what the screenshot script grabs): blurred by default, the choice never kept."""
    from ui.clip_view import ClipView

    view = ClipView()
    qtbot.addWidget(view)
    assert not view.unblur.isChecked()
    view.mesh.setChecked(False)  # the mesh lines are edges of their own; measure the picture under them
    with qtbot.waitSignal(view.frame_shown, timeout=60000):
        view.set_clip(faces_clip, position_s=0.3)
    shown = view.shown_image()
    subject = max(face_boxes, key=lambda b: (b[2] - b[0]) * (b[3] - b[1]))
    raw = hf_energy(frame, subject)
    assert hf_energy(shown, subject) < MAX_HF_SHARE * raw
    view.unblur.setChecked(True)
    assert hf_energy(view.shown_image(), subject) > 0.5 * raw
    view.shutdown()
    again = ClipView()
    qtbot.addWidget(again)
    assert not again.unblur.isChecked()  # a new view starts blurred
    again.shutdown()


# --- exports hold features and samples, not frames -------------------------------------------

_IMAGE_MAGIC = (b"\x89PNG\r\n\x1a\n", b"\xff\xd8\xff", b"GIF8", b"RIFF", b"BM")


def _embedded_images(html: str) -> list[tuple[str, bytes]]:
    return [(m.group(1), base64.b64decode(m.group(2)))
            for m in re.finditer(r"data:image/([a-z+]+);base64,([A-Za-z0-9+/=]+)", html)]


def _is_plot(png: bytes) -> bool:
    """A chart: a few flat colours (background, fills) cover most of it (a video frame has no dominant colours)."""
    from PIL import Image

    img = np.asarray(Image.open(io.BytesIO(png)).convert("RGB"))
    flat = img.reshape(-1, 3)
    _, counts = np.unique(flat, axis=0, return_counts=True)
    return np.sort(counts)[-3:].sum() / len(flat) > 0.6


def _scan_exports(out: Path, *, frame_px: int) -> list[Path]:
    files = [p for p in out.rglob("*") if p.is_file()]
    for p in files:
        data = p.read_bytes()
        if p.suffix in (".csv", ".json", ".tsv", ".txt", ".md"):
            assert not any(m in data for m in _IMAGE_MAGIC[:2]), f"{p} holds picture data"
            assert b"base64" not in data, f"{p} holds base64 data"
        elif p.suffix == ".parquet":
            df = pd.read_parquet(p)
            for col in df.columns:
                assert df[col].dtype.kind in "biufMmO", (p, col, df[col].dtype)
                if df[col].dtype.kind == "O":
                    longest = df[col].dropna().map(lambda v: len(v) if isinstance(v, (str, bytes)) else 0).max()
                    assert not longest or longest < 200, f"{p}:{col} holds long blobs"
        elif p.suffix == ".png":  # report figures written beside the report
            assert _is_plot(data), f"{p} is not a chart"
        elif p.suffix == ".html":
            html = data.decode("utf-8")
            for kind, blob in _embedded_images(html):
                assert kind == "png", f"{p} embeds a {kind} picture"
                assert _is_plot(blob), f"{p} embeds a picture that is not a chart"
        else:
            pytest.fail(f"unexpected export file type: {p}")
    # the samples table is about 300 bytes a frame: nothing like a frame's {frame_px} pixels
    for p in out.rglob("samples.parquet"):
        n = len(pd.read_parquet(p))
        assert p.stat().st_size < 0.01 * n * frame_px, p
    return files


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_exports_of_the_demo_study_hold_no_pictures(tmp_path, capsys):
    from aspectus.cli import main

    clip = SAMPLE_CLIPS / "linden_brook_p01_s01.mp4"
    ref = SAMPLE_CLIPS / "lab_tracker" / "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz"
    if not clip.is_file() or not ref.is_file():
        pytest.skip("demo study absent: run scripts/make_sample_clips.py")
    out = tmp_path / "out"
    assert main(["process", str(clip), "-o", str(out), "--quiet",
                 "--segments", str(SAMPLE_CLIPS / "segments_p01_s01.csv")]) == 0
    assert main(["validate", str(out / clip.stem), str(ref), "-o", str(out / "validation")]) == 0, \
        capsys.readouterr().err
    html = (out / "validation" / "report.html").read_text()
    assert len(_embedded_images(html)) >= 2  # the report has figures, and they are charts
    files = _scan_exports(out, frame_px=1280 * 720)
    assert {p.name for p in files} >= {"samples.parquet", "samples.csv", "events.csv", "features.csv", "run.json",
                                       "report.html"}


def test_a_video_frame_is_not_taken_for_a_plot(frame):
    """The chart test in _scan_exports can fail: a frame PNG is not a plot, a matplotlib chart is."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    cv2 = import_cv2()
    ok, buf = cv2.imencode(".png", cv2.cvtColor(frame, cv2.COLOR_RGB2BGR))
    assert ok and not _is_plot(buf.tobytes())
    fig, ax = plt.subplots(figsize=(4, 3))
    ax.plot(np.arange(10), np.arange(10) ** 2)
    b = io.BytesIO()
    fig.savefig(b, format="png")
    plt.close(fig)
    assert _is_plot(b.getvalue())


# --- aspectus purge ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def processed(faces_clip, tmp_path_factory):
    from aspectus.cli import main

    out = tmp_path_factory.mktemp("purge_base")
    assert main(["process", str(faces_clip), "-o", str(out), "--quiet"]) == 0
    return out


def _copy(src: Path, dst: Path) -> Path:
    import shutil

    shutil.copytree(src, dst)
    return dst


def test_purge_dry_run_lists_and_keeps(processed, tmp_path, capsys):
    from aspectus.cli import main

    out = _copy(processed, tmp_path / "out")
    before = sorted(p.relative_to(out) for p in out.rglob("*"))
    assert main(["purge", str(out), "--dry-run"]) == 0
    text = capsys.readouterr().out
    assert "would delete" in text and "samples.parquet" in text and "samples.csv" in text
    deleted = [ln for ln in text.splitlines() if "would delete" in ln]
    assert len(deleted) == 2
    assert not any(n in ln for ln in deleted for n in ("events", "features", "run.json"))
    assert sorted(p.relative_to(out) for p in out.rglob("*")) == before


def test_purge_asks_and_refuses_without_a_terminal(processed, tmp_path, capsys, monkeypatch):
    from aspectus.cli import main

    out = _copy(processed, tmp_path / "out")
    monkeypatch.setattr(sys, "stdin", io.StringIO("yes\n"))  # not a terminal: never taken as an answer
    assert main(["purge", str(out)]) == 2
    cap = capsys.readouterr()
    assert "needs confirmation" in cap.err
    # nothing is deleted, so the list says what would go, not "delete"
    assert "would delete" in cap.out and "  delete " not in cap.out
    assert (out / "linden_brook_p01_s01" / "samples.parquet").is_file()


def test_purge_answer_other_than_yes_deletes_nothing(processed, tmp_path, capsys, monkeypatch):
    from aspectus.cli import main

    out = _copy(processed, tmp_path / "out")

    class Tty(io.StringIO):
        def isatty(self):
            return True

    monkeypatch.setattr(sys, "stdin", Tty("y\n"))
    assert main(["purge", str(out)]) == 1
    assert (out / "linden_brook_p01_s01" / "samples.parquet").is_file()
    monkeypatch.setattr(sys, "stdin", Tty("yes\n"))
    assert main(["purge", str(out)]) == 0
    assert not (out / "linden_brook_p01_s01" / "samples.parquet").exists()


def test_purge_deletes_per_frame_data_and_keeps_results(processed, tmp_path, capsys):
    from aspectus.studies.batch import clip_is_done
    from aspectus.cli import main
    from aspectus.webcam.pipeline import CacheError, load_samples

    out = _copy(processed, tmp_path / "out")
    d = out / "linden_brook_p01_s01"
    run_before = json.loads((d / "run.json").read_text())
    (d / ".samples.parquet.x1y2.part").write_bytes(b"left by a killed run")
    (d / "frames").mkdir()
    (d / "frames" / "000001.png").write_bytes(b"\x89PNG\r\n\x1a\n")
    keep = {n: (d / n).read_bytes() for n in ("events.csv", "events.parquet", "features.csv", "features.parquet")}
    assert main(["purge", str(out), "--yes"]) == 0
    left = sorted(p.name for p in d.iterdir())
    # frames/ is not listed in run.json: not aspectus's to delete (issue 17.4)
    assert left == sorted(list(keep) + ["frames", "run.json"])
    for n, b in keep.items():
        assert (d / n).read_bytes() == b
    run = json.loads((d / "run.json").read_text())
    assert "samples.parquet" not in run["outputs"] and "samples.csv" not in run["outputs"]
    assert set(run["purged"]["files"]) >= {"samples.parquet", "samples.csv"}
    assert run["quality"] == run_before["quality"]
    # still finished for the batch runner (not redone), and a clear message when the samples are wanted
    done, why = clip_is_done(d, input_sha256=run["input_sha256"], params_sha256=run["params_sha256"])
    assert done, why
    with pytest.raises(CacheError, match="deleted by `aspectus purge`") as err:
        load_samples(d)
    assert "aspectus process " in str(err.value) and "-o " in str(err.value)  # the command that rebuilds it
    # a second purge finds nothing more
    capsys.readouterr()
    assert main(["purge", str(out), "--yes"]) == 0
    assert "no per-frame data left" in capsys.readouterr().out


def test_purge_then_process_rebuilds_the_samples(processed, faces_clip, tmp_path):
    from aspectus.cli import main
    from aspectus.webcam.pipeline import load_samples

    out = _copy(processed, tmp_path / "out")
    assert main(["purge", str(out), "--yes"]) == 0
    assert main(["process", str(faces_clip), "-o", str(out), "--quiet"]) == 0
    s = load_samples(out / faces_clip.stem)  # checksum verified
    assert len(s) == json.loads((out / faces_clip.stem / "run.json").read_text())["quality"]["frames"]


def test_purge_a_study_file_uses_its_output_folder(processed, tmp_path):
    from aspectus.cli import main
    from aspectus.studies.project import new_study

    root = tmp_path / "study"
    root.mkdir()
    _copy(processed, root / "results")
    s = new_study(path=root / "reading_pilot.json", name="Linden Brook reading pilot", output_dir="results")
    s.save()
    assert main(["purge", str(root / "reading_pilot.json"), "--yes"]) == 0
    assert not (root / "results" / "linden_brook_p01_s01" / "samples.parquet").exists()
    assert (root / "results" / "linden_brook_p01_s01" / "features.csv").is_file()


@pytest.mark.parametrize("what,msg", [("missing", "no such folder"), ("empty", "holds no clip output folders"),
                                      ("csv", "neither an output folder nor a study file")])
def test_purge_bad_targets(what, msg, tmp_path, capsys):
    from aspectus.cli import main

    target = {"missing": tmp_path / "nope", "empty": tmp_path, "csv": tmp_path / "features.csv"}[what]
    if what == "csv":
        target.write_text("a,b\n")
    assert main(["purge", str(target), "--yes"]) == 2
    err = capsys.readouterr().err
    assert msg in err and str(target) in err
