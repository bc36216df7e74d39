"""The Qt-free study model: clips, paths relative to the study file, save/reopen, status from run.json."""
from __future__ import annotations

import json
import shutil

import pytest

from aspectus.errors import AspectusInputError
from aspectus.studies.project import (STATUS_DONE, STATUS_FAILED, STATUS_NEW, STATUS_STALE, guess_reference_kind, load_study,
                           missing_files, new_study)


@pytest.fixture()
def folder(tmp_path):
    clips = tmp_path / "clips"
    clips.mkdir()
    for stem in ("p01_s01", "p02_s01", "p03_s01"):
        (clips / f"{stem}.mp4").write_bytes(b"\x00" * 16)
    (clips / "p01_s01_segments.csv").write_text("label,onset_s,offset_s\npage1,0,1\n")
    (clips / "notes.txt").write_text("not a clip")
    return tmp_path


def test_add_folder_save_reopen_relative_paths(folder):
    s = new_study(path=folder / "pilot.aspectus-study.json", name="Linden Brook Primary School reading pilot")
    added, problems = s.add_paths([folder / "clips"])
    assert [c.stem for c in added] == ["p01_s01", "p02_s01", "p03_s01"]
    assert problems == []
    # a segments file named after the clip is picked up
    assert s.find("p01_s01").segments == "clips/p01_s01_segments.csv"
    assert s.find("p02_s01").segments is None
    s.view = {"selected": "p02_s01", "tab": 1, "position_s": 0.5}
    s.save()
    raw = json.loads((folder / "pilot.aspectus-study.json").read_text())
    assert raw["format"] == "aspectus-study"
    assert [c["path"] for c in raw["clips"]] == ["clips/p01_s01.mp4", "clips/p02_s01.mp4", "clips/p03_s01.mp4"]
    # moving the whole folder keeps the study working
    moved = folder.parent / (folder.name + "_moved")
    shutil.move(folder, moved)
    s2 = load_study(moved / "pilot.aspectus-study.json")
    assert s2.name == "Linden Brook Primary School reading pilot"
    assert s2.clip_path(s2.find("p03_s01")) == (moved / "clips" / "p03_s01.mp4").resolve()
    assert s2.view == {"selected": "p02_s01", "tab": 1, "position_s": 0.5}
    assert missing_files(s2) == []
    assert s2.clip_out_dir(s2.find("p01_s01")) == (moved / "results" / "p01_s01").resolve()


def test_save_as_elsewhere_rebases_paths(folder):
    s = new_study(path=folder / "a.json")
    s.add_clip(folder / "clips" / "p01_s01.mp4")
    (folder / "sub").mkdir()
    s.save(folder / "sub" / "b.json")
    raw = json.loads((folder / "sub" / "b.json").read_text())
    assert raw["clips"][0]["path"] == "../clips/p01_s01.mp4"
    assert raw["output_dir"] == "../results"
    s2 = load_study(folder / "sub" / "b.json")
    assert s2.clip_path(s2.clips[0]) == (folder / "clips" / "p01_s01.mp4").resolve()


def test_bad_additions_are_reported_not_raised(folder):
    s = new_study(path=folder / "a.json")
    other = folder / "other"
    other.mkdir()
    (other / "p01_s01.mov").write_bytes(b"\x00")
    added, problems = s.add_paths([folder / "clips" / "p01_s01.mp4", other / "p01_s01.mov",
                                   folder / "clips" / "notes.txt", folder / "nope.mp4", folder / "empty_dir"])
    assert len(added) == 1
    assert len(problems) == 4
    assert "also called 'p01_s01'" in problems[0] and "p01_s01.mov" in problems[0]
    assert "not a video file" in problems[1] and "notes.txt" in problems[1]
    assert "no such clip file" in problems[2]
    # adding the same file twice is harmless
    again, probs = s.add_paths([folder / "clips" / "p01_s01.mp4"])
    assert again == [] and probs == [] and len(s.clips) == 1


def test_status_from_run_json(folder):
    s = new_study(path=folder / "a.json")
    s.process = {"fov_deg": 60.0, "face": "largest", "max_faces": 4}
    c = s.add_clip(folder / "clips" / "p01_s01.mp4")
    assert c.status == STATUS_NEW
    out = s.clip_out_dir(c)
    out.mkdir(parents=True)
    (out / "run.json").write_text(json.dumps({
        "params": {"fov_deg": 60.0, "face": "largest", "max_faces": 4, "analysis": {"detector": "x"}},
        "quality": {"frames": 30, "face_found_frac": 0.9, "usable": True, "verdict": "Usable.", "extra": 1}}))
    assert s.refresh_status(c) == STATUS_DONE
    assert c.summary == {"frames": 30, "face_found_frac": 0.9, "usable": True, "verdict": "Usable."}
    s.process["fov_deg"] = 70.0
    assert s.refresh_status(c) == STATUS_STALE
    assert s.clips_to_process() == [c]
    (out / "run.json").unlink()
    assert s.refresh_status(c) == STATUS_NEW and c.summary == {}
    c.status, c.error = STATUS_FAILED, "no face"
    assert s.refresh_status(c) == STATUS_FAILED


def test_reference_mapping_remembered(folder):
    s = new_study(path=folder / "a.json")
    c1 = s.add_clip(folder / "clips" / "p01_s01.mp4")
    c2 = s.add_clip(folder / "clips" / "p02_s01.mp4")
    t1 = folder / "clips" / "p01_s01_lab.csv"
    t2 = folder / "clips" / "p02_s01_lab.csv"
    t1.write_text("t,x,y\n")
    t2.write_text("t,x,y\n")
    m = {"time_col": "t", "x_col": "x", "y_col": "y", "units": "deg", "time_unit": "ms"}
    s.set_reference(c1, t1, mapping=m)
    s.set_reference(c2, t2)  # same columns: the last mapping is offered again
    assert c2.reference.kind == "table" and c2.reference.mapping == m
    s.save()
    s2 = load_study(folder / "a.json")
    assert s2.find("p01_s01").reference.mapping == m
    assert s2.mappings["clips/p01_s01_lab.csv"] == m
    assert guess_reference_kind(folder / "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz") == "bids"
    with pytest.raises(AspectusInputError, match="no such reference file"):
        s.set_reference(c1, folder / "missing.csv")


@pytest.mark.parametrize("content,match", [
    ("{not json", "not valid JSON"),
    ('{"format": "something-else"}', "not an aspectus study"),
    ('{"format": "aspectus-study", "version": 99}', "newer than this aspectus"),
    ('{"format": "aspectus-study", "version": 1, "clips": [{"nopath": 1}]}', r"clips\[0\]"),
    ('{"format": "aspectus-study", "version": 1, "clips": {"a": 1}}', "'clips' should be list"),
    ('{"format": "aspectus-study", "version": 1, "clips": [{"path": "a/x.mp4"}, {"path": "b/x.mp4"}]}',
     "two clips are called 'x'"),
])
def test_broken_study_files_named(tmp_path, content, match):
    p = tmp_path / "broken.json"
    p.write_text(content)
    with pytest.raises(AspectusInputError, match=match) as ei:
        load_study(p)
    assert "broken.json" in str(ei.value)


def test_missing_file_and_missing_clip_listed(tmp_path):
    with pytest.raises(AspectusInputError, match="no such study file"):
        load_study(tmp_path / "absent.json")
    p = tmp_path / "s.json"
    p.write_text('{"format": "aspectus-study", "version": 1, "clips": [{"path": "gone.mp4"}]}')
    s = load_study(p)
    probs = missing_files(s)
    assert len(probs) == 1 and "gone.mp4" in probs[0]


def _processed_study(tmp_path, stems):
    """A study whose clips have finished results (run.json) and a reference file each (contents not read)."""
    s = new_study(path=tmp_path / "Class #3" / "pilot.aspectus-study.json")
    clips = tmp_path / "Class #3" / "clips"
    clips.mkdir(parents=True)
    for stem in stems:
        (clips / f"{stem}.mp4").write_bytes(b"\x00" * 16)
        ref = clips / f"{stem}_physio.tsv.gz"
        ref.write_bytes(b"\x00")
        c = s.add_clip(clips / f"{stem}.mp4")
        out = s.clip_out_dir(c)
        out.mkdir(parents=True)
        (out / "run.json").write_text(json.dumps({"params": {}, "quality": {"frames": 30}}))
        s.set_reference(c, ref, kind="bids")
    s.refresh_all()
    return s


def test_validation_manifest_labels_unique_keys_and_hash_in_path(tmp_path):
    from aspectus.studies.project import write_validation_manifest
    from aspectus.validation.manifest import read_validation_manifest

    stems = ["linden_brook_p01_s01", "anna_s1", "anna_s2", "anna 1", "anna-1", "学生一", "sub-07_ses-2_task-read"]
    s = _processed_study(tmp_path, stems)
    manifest, skipped = write_validation_manifest(s, tmp_path / "Class #3" / "validation" / "validation_manifest.csv")
    assert skipped == []
    rows = read_validation_manifest(manifest)  # a '#' inside a path is not a comment
    got = {r.webcam.name: (r.participant, r.session, r.task) for r in rows}
    assert got["linden_brook_p01_s01"] == ("p01", "s01", None)
    assert got["anna_s1"] == ("anna", "s1", None) and got["anna_s2"] == ("anna", "s2", None)  # one participant
    assert got["sub-07_ses-2_task-read"] == ("07", "2", "read")
    assert got["学生一"][0] == "clip6"  # nothing usable in the name: numbered
    # "anna 1" and "anna-1" clean to the same label: still two distinct pairs, not an error
    assert got["anna 1"][0] == got["anna-1"][0] == "anna-1" and got["anna 1"][1] != got["anna-1"][1]
    assert len({r.key for r in rows}) == len(rows) == len(stems)
    assert all(r.webcam.is_dir() and "#3" in str(r.webcam) for r in rows)


def test_manifest_comment_lines_only_whole_lines(tmp_path):
    from aspectus.validation.manifest import read_validation_manifest

    d = tmp_path / "room #2"
    (d / "cam").mkdir(parents=True)
    (d / "ref.tsv.gz").write_bytes(b"\x00")
    (d / "m.csv").write_text("# pairs of the pilot\nwebcam,reference,participant\n  # a note\ncam,ref.tsv.gz,p01\n")
    (row,) = read_validation_manifest(d / "m.csv")
    assert row.webcam == d / "cam" and row.participant == "p01" and row.line == 4  # the file's own line number
    (d / "bad.csv").write_text("webcam,reference\n# skipped\ncam,missing.tsv.gz\n")
    with pytest.raises(AspectusInputError, match="row 3"):
        read_validation_manifest(d / "bad.csv")


def test_new_reference_drops_the_given_offset(tmp_path):
    from aspectus.studies.project import write_validation_manifest

    s = _processed_study(tmp_path, ["p01_s01"])
    c = s.clips[0]
    c.validation = {"offset_s": -0.4, "features": 3, "offset_given": True}
    m, _ = write_validation_manifest(s, tmp_path / "v1" / "m.csv")
    import pandas as pd

    assert pd.read_csv(m)["offset_s"].tolist() == [-0.4]
    s.set_reference(c, s.resolve(c.reference.path), kind="bids")  # the same file again: kept
    assert c.validation["offset_given"] is True
    other = tmp_path / "other_physio.tsv.gz"
    other.write_bytes(b"\x00")
    s.set_reference(c, other, kind="bids")  # another recording: the offset was for the old one
    assert c.validation == {}
    m, _ = write_validation_manifest(s, tmp_path / "v2" / "m.csv")
    assert pd.read_csv(m)["offset_s"].isna().all()


def test_study_validation_replaces_the_folder_only_when_complete(tmp_path):
    """A failed or cancelled run leaves an earlier complete result as it was and no partial folder."""
    from aspectus.errors import Cancelled
    from aspectus.studies.project import run_study_validation

    s = _processed_study(tmp_path, ["p01_s01"])
    out = tmp_path / "validation"
    out.mkdir()
    (out / "report.html").write_text("earlier complete report")

    def cancel(frac, msg):
        raise Cancelled("stop")

    with pytest.raises(Cancelled):
        run_study_validation(s, out, progress=cancel)
    # the reference files here are not recordings: the comparison fails, also without touching the result
    with pytest.raises(AspectusInputError, match="no pair of the study could be validated"):
        run_study_validation(s, out)
    assert (out / "report.html").read_text() == "earlier complete report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["Class #3", "validation"]
