"""The same batch on a real local Dask cluster (worker processes, loopback only) and on the local pool.

Results must be equal exactly: the pipeline is deterministic for the same
clip on the same machine, and the coordinator's resume logic is the same
whichever engine runs the clips.
"""
from __future__ import annotations

import shutil

import pandas as pd
import pytest

from aspectus.studies.batch import run_batch
from aspectus.studies.engines import DaskEngine
from test_batch_pipeline import render_study_clips

pytestmark = pytest.mark.slow

VOLATILE = ["worker", "elapsed_s", "finished_utc"]  # who ran a clip, how long, when


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as c:
        yield c


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    clips = render_study_clips(tmp_path_factory.getbasetemp())
    src = tmp_path_factory.mktemp("dask_study")
    for stem in ("p01_s01", "p02_s01", "p03_s01"):
        shutil.copy(clips / "good" / f"{stem}.mp4", src / f"{stem}.mp4")
    shutil.copy(clips / "bad" / "p07_s01_truncated.mp4", src)
    return src


def test_dask_batch_equals_local_pool_exactly(cluster, study, tmp_path):
    local = run_batch(study, tmp_path / "local", workers=2)
    seen: list[tuple[float, str]] = []
    dask = run_batch(study, tmp_path / "dask", scheduler=cluster.scheduler_address,
                     progress=lambda frac, msg: seen.append((frac, msg)))
    # per-clip progress travels from the cluster's workers to the coordinator
    assert any(m.startswith("p01_s01: ") and "done" not in m for _, m in seen)
    assert seen[-1][0] == pytest.approx(1.0)
    assert "Dask cluster at tcp://127.0.0.1:" in dask.engine and "2 worker(s)" in dask.engine
    assert local.counts == dask.counts == {"done": 3, "skipped": 0, "failed": 1, "pending": 0}
    assert dask.status["worker"].str.contains("tcp://127.0.0.1:").sum() == 4
    pd.testing.assert_frame_equal(local.status.drop(columns=VOLATILE), dask.status.drop(columns=VOLATILE))
    pd.testing.assert_frame_equal(local.study, dask.study)
    for key in ("p01_s01", "p02_s01", "p03_s01"):
        for name in ("samples.parquet", "events.parquet", "features.parquet"):
            a = pd.read_parquet(tmp_path / "local" / key / name)
            b = pd.read_parquet(tmp_path / "dask" / key / name)
            pd.testing.assert_frame_equal(a, b, check_exact=True)
    # resume works the same on the cluster: nothing is redone
    again = run_batch(study, tmp_path / "dask", engine=DaskEngine(cluster=cluster))
    assert again.counts == {"done": 0, "skipped": 3, "failed": 1, "pending": 0}
    # and a folder finished by the local pool is recognised by a cluster run, too
    cross = run_batch(study, tmp_path / "local", scheduler=cluster.scheduler_address)
    assert cross.counts["skipped"] == 3


def test_dask_cancel_leaves_clips_pending(cluster, study, tmp_path):
    import threading

    stop = threading.Event()
    stop.set()  # cancelled before anything ran: no clip may be reported done
    res = run_batch(study, tmp_path / "out", engine=DaskEngine(cluster=cluster), cancel=stop)
    assert res.counts["done"] == 0
    assert set(res.status["status"]) <= {"pending", "failed"}
    rerun = run_batch(study, tmp_path / "out", engine=DaskEngine(cluster=cluster))
    assert rerun.counts["done"] == 3


def test_unreachable_scheduler_is_a_clear_error(study, tmp_path):
    from aspectus.errors import AspectusError

    with pytest.raises(AspectusError, match="cannot reach the Dask scheduler at tcp://127.0.0.1:9"):
        run_batch(study, tmp_path / "out", engine=DaskEngine(address="tcp://127.0.0.1:9", connect_timeout_s=2))
