"""Output folders the file system refuses: every writing command answers in one line naming the folder or
file and what to do, never with a traceback (tests run as root, so a path below a file, or a file name that
is taken by a folder, stands in for a read-only folder)."""
from __future__ import annotations

import pytest

from aspectus.cli import main

TARGETS_MAKE = ["targets", "make", "--screen-px", "1920", "1080", "--screen-mm", "344", "194", "--distance-mm", "600",
                "--no-video"]


@pytest.mark.parametrize("argv", [
    ["export-bids", "{results}"],
    ["targets", "table", "{results}"],
    TARGETS_MAKE,
], ids=["export-bids", "targets-table", "targets-make"])
def test_outdir_below_a_file_is_one_line(tmp_path, capsys, argv):
    results = tmp_path / "results"
    results.mkdir()
    blocker = tmp_path / "notes.txt"
    blocker.write_text("not a folder\n")
    out = blocker / "sub"
    rc = main([a.format(results=results) for a in argv] + ["-o", str(out)])
    err = capsys.readouterr().err
    assert rc != 0
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("aspectus: error:"), err
    assert str(out) in lines[0] and "notes.txt" in lines[0]
    assert not blocker.is_dir() and blocker.read_text() == "not a folder\n"


def test_a_refused_write_inside_the_outdir_is_one_line(tmp_path, capsys):
    out = tmp_path / "sequence"
    (out / "schedule.json").mkdir(parents=True)  # the name is taken by a folder: the write is refused
    rc = main(TARGETS_MAKE + ["-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 1
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("aspectus: error:"), err
    assert "schedule.json" in lines[0] and "you can write to it" in lines[0]
    assert (out / "schedule.json").is_dir()
