"""The pipeline's helpers yield to the face mesh: lower scheduling priority for the decoder and the geometry.

Reference: the nice values the operating system itself reports (``os.getpriority``), Linux semantics
(nice is per thread there; POSIX ``setpriority`` elsewhere applies to the process).
"""
from __future__ import annotations

import os
import subprocess
import sys
import threading

import pytest

from aspectus._env import lower_process_priority, lower_this_thread_priority

linux_only = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="per-thread nice values are Linux's")
has_nice = pytest.mark.skipif(not hasattr(os, "setpriority"), reason="this platform has no nice values")


@has_nice
def test_a_child_process_runs_lower_by_the_given_steps():
    own = os.getpriority(os.PRIO_PROCESS, 0)
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        assert lower_process_priority(child.pid, 10)
        assert os.getpriority(os.PRIO_PROCESS, child.pid) == min(19, own + 10)
        assert os.getpriority(os.PRIO_PROCESS, 0) == own  # this process is untouched
        assert not lower_process_priority(child.pid, 0)  # nothing to do
    finally:
        child.kill()
        child.wait()


@has_nice
def test_a_process_that_is_gone_is_reported_not_raised():
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    assert lower_process_priority(child.pid, 10) is False


@linux_only
def test_only_the_calling_thread_is_lowered():
    own = os.getpriority(os.PRIO_PROCESS, threading.get_native_id())
    seen = {}

    def work():
        seen["ok"] = lower_this_thread_priority(5)
        seen["nice"] = os.getpriority(os.PRIO_PROCESS, threading.get_native_id())

    t = threading.Thread(target=work)
    t.start()
    t.join()
    assert seen["ok"] and seen["nice"] == min(19, own + 5)
    assert os.getpriority(os.PRIO_PROCESS, threading.get_native_id()) == own


@pytest.fixture(scope="module")
def short_clip(rendered_clip):
    return rendered_clip(duration_s=1.0, seed=2, size_px=(320, 180), name="p07_s01_reading.mp4").path


@linux_only
def test_the_decoder_thread_runs_at_lower_priority(short_clip):
    from aspectus.webcam.video import FramePrefetcher

    own = os.getpriority(os.PRIO_PROCESS, threading.get_native_id())
    pf = FramePrefetcher(short_clip, lower_priority=5, depth=2)  # a short queue: the thread is still decoding
    it = iter(pf)
    first = next(it)
    nice = os.getpriority(os.PRIO_PROCESS, pf._thread.native_id)
    frames = 1 + sum(1 for _ in it)
    assert first.index == 0 and frames == 30
    assert nice == min(19, own + 5)
    assert os.getpriority(os.PRIO_PROCESS, threading.get_native_id()) == own  # the consumer is not lowered


@has_nice
def test_the_geometry_process_is_lowered_and_the_samples_do_not_change(short_clip, monkeypatch):
    import numpy as np

    from aspectus.webcam import pipeline

    seen = []
    real = pipeline.lower_process_priority

    def spy(pid, by):
        ok = real(pid, by)
        seen.append((by, ok, os.getpriority(os.PRIO_PROCESS, pid)))
        return ok

    monkeypatch.setattr(pipeline, "lower_process_priority", spy)
    own = os.getpriority(os.PRIO_PROCESS, 0)
    in_child, meta = pipeline.extract_samples(short_clip, geometry_mode="process")
    assert meta["geometry_ran_in"] == "process"
    assert seen == [(pipeline.GEOMETRY_NICE, True, min(19, own + pipeline.GEOMETRY_NICE))]
    in_thread, _ = pipeline.extract_samples(short_clip, geometry_mode="thread")
    assert len(seen) == 1  # a thread of this process is not lowered
    num = [c for c in in_child.columns if in_child[c].dtype.kind == "f"]
    np.testing.assert_array_equal(in_child[num].to_numpy(), in_thread[num].to_numpy())


has_affinity = pytest.mark.skipif(not (sys.platform.startswith("linux") and hasattr(os, "sched_getaffinity")
                                       and len(os.sched_getaffinity(0)) >= 2),
                                  reason="CPU placement needs Linux and two or more CPUs")


@has_affinity
def test_background_cpu_is_the_last_allowed_one_and_can_be_switched_off(monkeypatch):
    from aspectus._env import background_cpus

    allowed = sorted(os.sched_getaffinity(0))
    monkeypatch.delenv("ASPECTUS_PIN_BACKGROUND", raising=False)
    assert background_cpus() == {allowed[-1]}
    monkeypatch.setenv("ASPECTUS_PIN_BACKGROUND", "0")
    assert background_cpus() is None


@has_affinity
def test_the_decoder_thread_is_placed_on_the_background_cpu_alone(short_clip):
    from aspectus.webcam.video import FramePrefetcher

    allowed = set(os.sched_getaffinity(0))
    cpu = {max(allowed)}
    pf = FramePrefetcher(short_clip, depth=2, cpus=cpu)
    it = iter(pf)
    next(it)
    on = os.sched_getaffinity(pf._thread.native_id)
    rest = sum(1 for _ in it)
    assert on == cpu and rest == 29
    assert os.sched_getaffinity(0) == allowed  # the consumer (the face mesh's thread) may use every CPU


@has_affinity
def test_the_geometry_process_is_placed_on_the_background_cpu(short_clip, monkeypatch):
    from aspectus.webcam import pipeline

    monkeypatch.delenv("ASPECTUS_PIN_BACKGROUND", raising=False)
    seen = []
    real = pipeline.pin_to_cpus

    def spy(cpus, pid=0):
        ok = real(cpus, pid)
        seen.append((cpus, ok, os.sched_getaffinity(pid)))
        return ok

    monkeypatch.setattr(pipeline, "pin_to_cpus", spy)
    allowed = set(os.sched_getaffinity(0))
    _, meta = pipeline.extract_samples(short_clip, geometry_mode="process")
    assert meta["background_cpus"] == [max(allowed)]
    assert seen == [({max(allowed)}, True, {max(allowed)})]
    assert os.sched_getaffinity(0) == allowed
    # a batch worker leaves placement to the operating system (several would share the one CPU)
    monkeypatch.setenv("ASPECTUS_PIN_BACKGROUND", "0")
    _, meta = pipeline.extract_samples(short_clip, geometry_mode="process")
    assert meta["background_cpus"] is None and seen[-1][0] is None and seen[-1][1] is False
