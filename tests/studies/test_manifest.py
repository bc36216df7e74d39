"""Study manifests, folder discovery and output-folder keys."""
from __future__ import annotations

from pathlib import Path

import pytest

from aspectus.errors import AspectusInputError
from aspectus.studies.clips import assign_keys, discover_clips, labels_from_path, load_jobs, read_manifest, ClipJob


def _touch(p: Path, data: bytes = b"x") -> Path:
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_bytes(data)
    return p


def test_manifest_paths_labels_and_extra_columns(tmp_path):
    _touch(tmp_path / "clips" / "p01_s01.mp4")
    _touch(tmp_path / "clips" / "p02_s01.mp4")
    _touch(tmp_path / "ref" / "p01_s01.csv")
    man = tmp_path / "study.csv"
    man.write_text(
        "# Linden Brook Primary School reading pilot\n"
        "clip,participant,session,reference,segments,site\n"
        "clips/p01_s01.mp4,p01,s01,ref/p01_s01.csv,,north\n"
        "\n"
        "clips/p02_s01.mp4,p02,s01,,,\n",
        encoding="utf-8",
    )
    jobs = read_manifest(man)
    assert [j.key for j in jobs] == ["p01_s01", "p02_s01"]
    a, b = jobs
    assert a.clip == (tmp_path / "clips" / "p01_s01.mp4").resolve()
    assert a.reference == (tmp_path / "ref" / "p01_s01.csv").resolve()
    assert a.segments is None and b.reference is None
    assert (a.participant, a.session, a.labels) == ("p01", "s01", {"site": "north"})
    assert b.labels == {"site": None}
    assert a.row == 3 and b.row == 5  # lines of the file, header on line 2


def test_manifest_semicolon_bom_and_missing_clip_is_kept(tmp_path):
    man = tmp_path / "m.csv"
    man.write_bytes("\ufeffClip;Participant\nmissing.mp4;p07\n".encode("utf-8"))
    (j,) = read_manifest(man)
    assert j.participant == "p07" and not j.clip.exists()


@pytest.mark.parametrize("text, words, line", [
    ("participant,session\np01,s01\n", "no 'clip' column", "line 1"),
    ("clip,participant\n,p01\n", "empty 'clip' cell", "line 2"),
    ("clip,participant\na.mp4,p01\nb.mp4,p02\na.mp4,p03\n", "listed twice (first at line 2)", "line 4"),
    ("clip\na.mp4,extra\n", "2 cells but the header has 1", "line 2"),
    ("clip,clip\na.mp4,a.mp4\n", "appears twice", "line 1"),
    ("# only a comment\n", "manifest is empty", None),
    ("clip\n", "lists no clips", None),
])
def test_manifest_errors_name_file_and_line(tmp_path, text, words, line):
    man = tmp_path / "bad.csv"
    man.write_text(text, encoding="utf-8")
    with pytest.raises(AspectusInputError) as ei:
        read_manifest(man)
    msg = str(ei.value)
    assert words in msg and "bad.csv" in msg
    if line:
        assert f"({line})" in msg


def test_manifest_not_utf8_and_not_found(tmp_path):
    man = tmp_path / "latin.csv"
    man.write_bytes("clip\nschüler.mp4\n".encode("latin-1"))
    with pytest.raises(AspectusInputError, match="not a UTF-8 text file"):
        read_manifest(man)
    with pytest.raises(AspectusInputError, match="manifest not found"):
        read_manifest(tmp_path / "nope.csv")


def test_discovery_recursive_by_extension_skips_hidden_and_outdir(tmp_path):
    for rel in ("sub-p01/ses-s01/sub-p01_ses-s01_reading.mp4", "sub-p02/ses-s01/sub-p02_ses-s01_reading.MOV",
                "notes.txt", ".hidden/x.mp4", "out/p03.mp4", "._p04.mp4"):
        _touch(tmp_path / rel)
    jobs = discover_clips(tmp_path, exclude=[tmp_path / "out"])
    assert [j.rel for j in jobs] == ["sub-p01/ses-s01/sub-p01_ses-s01_reading.mp4",
                                     "sub-p02/ses-s01/sub-p02_ses-s01_reading.MOV"]
    assert [(j.participant, j.session) for j in jobs] == [("p01", "s01"), ("p02", "s01")]
    flat = discover_clips(tmp_path, recursive=False, extensions=(".txt",))
    assert [j.rel for j in flat] == ["notes.txt"]
    with pytest.raises(AspectusInputError, match="no clips found"):
        discover_clips(tmp_path, recursive=False)


def test_labels_from_pattern():
    lab = labels_from_path("site-north/p03_s02_story.mp4", pattern=r"(?P<participant>p\d+)_(?P<session>s\d+)")
    assert lab == {"participant": "p03", "session": "s02"}
    assert labels_from_path("x/y.avi", pattern=r"(?P<participant>p\d+)") == {}


def test_keys_disambiguate_shared_stems_deterministically(tmp_path):
    paths = ["classA/p01.mp4", "classB/p01.mp4", "classB/p01.mov", "p02.mp4", "classA/p03.mp4"]
    jobs = [ClipJob(clip=tmp_path / p, rel=p) for p in paths]
    keys = [j.key for j in assign_keys(jobs)]
    assert keys == ["classA__p01", "classB__p01_mp4", "classB__p01_mov", "p02", "p03"]
    # the same set in another order maps to the same folders
    again = {j.rel: j.key for j in assign_keys(list(reversed(jobs)))}
    assert [again[p] for p in paths] == keys
    # unsafe characters and leading dots never reach the folder name
    (odd,) = assign_keys([ClipJob(clip=tmp_path / "..weird name!.mp4", rel="..weird name!.mp4")])
    assert odd.key == "weird_name"


def test_load_jobs_dispatch(tmp_path):
    clip = _touch(tmp_path / "p01.mp4")
    with pytest.raises(AspectusInputError, match="single clip"):
        load_jobs(clip)
    with pytest.raises(AspectusInputError, match="not found"):
        load_jobs(tmp_path / "missing")
    assert [j.key for j in load_jobs(tmp_path)] == ["p01"]
