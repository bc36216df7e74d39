"""The one progress/cancel convention (aspectus.progress)."""
from __future__ import annotations

import threading

import pytest

from aspectus.errors import AspectusInputError, Cancelled, VideoError
from aspectus.progress import WeightedProgress, classify_failure, raise_if_cancelled, sub_progress


def test_weighted_progress_counts_finished_tasks_whole_and_never_goes_back():
    w = WeightedProgress(keys=["a", "b", "c"], weights={"a": 2.0, "b": 1.0, "c": 1.0})
    assert w.overall() == 0.0 and w.remaining_s() is None
    w.update("a", 0.5)
    assert w.overall() == pytest.approx(0.25)
    w.update("a", 0.2)  # a late, smaller report does not move it back
    assert w.overall() == pytest.approx(0.25)
    w.finish("b", "failed")
    w.finish("c", "cancelled")
    assert w.overall() == pytest.approx(0.75)
    w.finish("a", "done")
    assert w.overall() == 1.0


def test_sub_progress_maps_a_step_onto_its_share():
    seen = []
    step = sub_progress(lambda f, m: seen.append((round(f, 6), m)), 0.2, 0.6)
    step(0.0, "a")
    step(0.5, "b")
    step(2.0, "c")  # clipped
    assert seen == [(0.2, "a"), (0.4, "b"), (0.6, "c")]
    sub_progress(None, 0, 1)(0.5, "nothing happens")


def test_cancel_flag_raises_cancelled_only_when_set():
    ev = threading.Event()
    raise_if_cancelled(None)
    raise_if_cancelled(ev)
    ev.set()
    with pytest.raises(Cancelled):
        raise_if_cancelled(ev)


@pytest.mark.parametrize("exc, kind", [
    (Cancelled("x"), "cancelled"), (KeyboardInterrupt(), "cancelled"),
    (VideoError("cannot decode", path="a.mp4"), "input"), (AspectusInputError("bad row"), "input"),
    (MemoryError(), "memory"), (FileNotFoundError(2, "No such file", "/x/y"), "file"),
    (ZeroDivisionError("boom"), "internal")])
def test_failures_are_sorted_once_for_every_front_end(exc, kind):
    f = classify_failure(exc)
    assert f.kind == kind
    assert f.is_fault == (kind == "internal")
    assert "\n" not in f.message


def test_study_validation_stops_when_cancelled(tmp_path):
    from aspectus.validation.study import validate_study

    ev = threading.Event()
    ev.set()
    manifest = tmp_path / "m.csv"
    manifest.write_text("webcam,reference,participant\nnone,none,p01\n")
    with pytest.raises(Cancelled):
        validate_study(manifest, tmp_path / "out", cancel=ev)
    assert not (tmp_path / "out" / "study_summary.csv").exists()
