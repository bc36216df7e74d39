"""Processing is local: no socket is opened while the demo study is processed and validated.

Three ways of looking, from cheap to thorough:

1. in-process: ``socket.socket``, ``socket.create_connection``,
   ``socket.getaddrinfo`` (and friends) patched to record the attempt and
   raise; the demo clips are processed and validated through the CLI;
2. in a fresh interpreter with a ``sitecustomize`` hook doing the same from
   the very first import on;
3. under ``strace``, which also sees connections that native code
   (FFmpeg, MediaPipe, OpenCV) would make without going through Python.

Each hook is first shown to catch a real connection attempt, so that an empty
record means something.
"""
from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
SAMPLE_CLIPS = REPO / "sample_clips"

_HOOK = r'''
import os, socket
_log = os.environ["ASPECTUS_NET_LOG"]
def _deny(what):
    def f(*a, **k):
        with open(_log, "a") as fh:
            fh.write(f"{what} {a[:2]!r}\n")
        raise OSError(f"network use blocked by the test: {what}")
    return f
_Base = socket.socket
class _Guard(_Base):
    def __init__(self, family=-1, type=-1, proto=-1, fileno=None):
        if fileno is None and family in (-1, socket.AF_INET, socket.AF_INET6):
            _deny("socket")(family, type)
        super().__init__(family, type, proto, fileno)
socket.socket = _Guard
for _name in ("create_connection", "getaddrinfo", "gethostbyname", "gethostbyname_ex", "gethostbyaddr"):
    setattr(socket, _name, _deny(_name))
'''


def _demo_clips(tmp_path_factory) -> list[Path]:
    """The demo study's clips (sample_clips/), or small clips of the same scenario when they are not there."""
    clips = sorted(SAMPLE_CLIPS.glob("linden_brook_*.mp4"))
    if clips:
        return clips
    from aspectus.synth.render import render_clip, synth_trajectory

    d = tmp_path_factory.mktemp("demo")
    out = []
    for i, name in enumerate(("linden_brook_p01_s01", "linden_brook_p02_s01")):
        tr = synth_trajectory(duration_s=3.0 + 1 / 60, seed=101 + i)
        out.append(render_clip(d / f"{name}.mp4", tr, size_px=(640, 360), seed=101 + i).path)
    return out


@pytest.fixture(scope="module")
def demo_clips(tmp_path_factory):
    return _demo_clips(tmp_path_factory)


def _demo_reference() -> Path | None:
    hits = sorted((SAMPLE_CLIPS / "lab_tracker").glob("*_physio.tsv.gz")) if (SAMPLE_CLIPS / "lab_tracker").is_dir() else []
    return hits[0] if hits else None


@pytest.fixture
def blocked_network(monkeypatch, tmp_path):
    """Patch the socket module in this process; yields the list of attempts."""
    log = tmp_path / "net.log"
    log.write_text("")
    monkeypatch.setenv("ASPECTUS_NET_LOG", str(log))
    saved = {n: getattr(socket, n) for n in ("socket", "create_connection", "getaddrinfo", "gethostbyname",
                                             "gethostbyname_ex", "gethostbyaddr")}
    exec(compile(_HOOK, "net_hook", "exec"), {})
    try:
        yield log
    finally:
        for n, v in saved.items():
            setattr(socket, n, v)


def test_in_process_hook_catches_a_connection(blocked_network):
    with pytest.raises(OSError, match="blocked"):
        socket.create_connection(("192.0.2.1", 80), timeout=0.1)  # TEST-NET-1, never routed
    with pytest.raises(OSError, match="blocked"):
        socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    assert blocked_network.read_text().count("\n") == 2


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_processing_the_demo_study_opens_no_socket(blocked_network, demo_clips, tmp_path, capsys):
    from aspectus.cli import main

    out = tmp_path / "out"
    assert main(["process", *map(str, demo_clips), "-o", str(out), "--quiet"]) == 0, capsys.readouterr().err
    ref = _demo_reference()
    if ref is not None:
        webcam = out / "linden_brook_p01_s01"
        assert main(["validate", str(webcam), str(ref), "-o", str(tmp_path / "validation"),
                     "--participant", "p01", "--session", "s01"]) == 0, capsys.readouterr().err
        assert (tmp_path / "validation" / "report.html").is_file()
    for c in demo_clips:
        assert (out / c.stem / "run.json").is_file()
    assert blocked_network.read_text() == "", f"network use while processing: {blocked_network.read_text()}"


def _hook_env(tmp_path: Path) -> tuple[dict, Path]:
    hook_dir = tmp_path / "hook"
    hook_dir.mkdir()
    (hook_dir / "sitecustomize.py").write_text(_HOOK)
    log = tmp_path / "net.log"
    log.write_text("")
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(hook_dir), str(REPO)]), ASPECTUS_NET_LOG=str(log),
               GLOG_minloglevel="2")
    return env, log


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_a_fresh_interpreter_with_a_socket_hook_processes_a_clip_offline(demo_clips, tmp_path):
    env, log = _hook_env(tmp_path)
    control = subprocess.run([sys.executable, "-c", "import socket; socket.create_connection(('192.0.2.1', 80), 0.1)"],
                             env=env, capture_output=True, text=True, timeout=60)
    assert control.returncode != 0 and "blocked" in control.stderr
    assert "create_connection" in log.read_text()
    log.write_text("")
    clip = demo_clips[-1]
    p = subprocess.run([sys.executable, "-m", "aspectus", "process", str(clip), "-o", str(tmp_path / "out"), "--quiet"],
                       env=env, capture_output=True, text=True, timeout=500)
    assert p.returncode == 0, p.stderr
    assert log.read_text() == "", f"network use while processing: {log.read_text()}"


def _strace_ok() -> bool:
    if shutil.which("strace") is None:
        return False
    r = subprocess.run(["strace", "-f", "-qq", "-e", "trace=none", "true"], capture_output=True, timeout=30)
    return r.returncode == 0


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_no_native_code_connects_either(demo_clips, tmp_path):
    if not _strace_ok():
        pytest.skip("strace is not installed or may not trace here (ptrace not permitted)")
    env = dict(os.environ, PYTHONPATH=str(REPO), GLOG_minloglevel="2")

    def traced(args, log):
        return subprocess.run(["strace", "-f", "-qq", "-e", "trace=connect,sendto,sendmsg", "-o", str(log), *args],
                              env=env, capture_output=True, text=True, timeout=500)

    def inet_calls(log: Path) -> list[str]:
        return [ln for ln in log.read_text().splitlines() if "AF_INET" in ln]

    control_log = tmp_path / "control.strace"
    traced([sys.executable, "-c", "import socket\ntry: socket.create_connection(('192.0.2.1', 80), 0.05)\n"
            "except OSError: pass"], control_log)
    assert inet_calls(control_log), "strace did not see a deliberate connection attempt"
    log = tmp_path / "process.strace"
    p = traced([sys.executable, "-m", "aspectus", "process", str(demo_clips[-1]), "-o", str(tmp_path / "out"), "--quiet"],
               log)
    assert p.returncode == 0, p.stderr
    assert inet_calls(log) == [], "network connection attempts:\n" + "\n".join(inet_calls(log))


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_a_batch_run_on_local_worker_processes_is_offline(demo_clips, tmp_path):
    """``aspectus batch`` with its default engine (local worker processes, which inherit the hook) opens no socket."""
    env, log = _hook_env(tmp_path)
    folder = tmp_path / "study"
    folder.mkdir()
    (folder / demo_clips[-1].name).symlink_to(demo_clips[-1])
    p = subprocess.run([sys.executable, "-m", "aspectus", "batch", str(folder), "-o", str(tmp_path / "out"),
                        "--workers", "1", "--quiet"], env=env, capture_output=True, text=True, timeout=500)
    assert p.returncode == 0, p.stderr
    assert (tmp_path / "out" / demo_clips[-1].stem / "run.json").is_file()
    assert log.read_text() == "", f"network use in the batch run: {log.read_text()}"
