"""Where the clips of a batch run: a local process pool or a Dask cluster.

Both engines run the same task function, ``fn(payload, progress, cancel) ->
dict``, once per clip, and hand back outcomes as the clips finish, in any
order. They know nothing about clips, hashes or outputs: deciding what is
done, what to run and what to record is the coordinator's job
(:mod:`aspectus.studies.batch`), so resume logic is identical whichever engine runs.

* :class:`LocalEngine` - :class:`concurrent.futures.ProcessPoolExecutor` with
  the ``spawn`` start method (the face mesh is not fork-safe). At most one
  clip per worker is in flight, so stopping submission stops the run. Worker
  processes ignore Ctrl-C (the coordinator asks them to stop through a cancel
  flag) and exit by themselves when the coordinator process dies, so a
  killed run leaves no orphan writing into the output folder. A worker that
  crashes (segfault, out of memory) breaks the pool; the engine starts a new
  pool and retries the clips that were running, and gives up on a clip after
  it was running during two crashes.
* :class:`DaskEngine` - ``dask.distributed``: one task per clip
  (``pure=False``), results gathered with ``as_completed``. Progress travels
  as worker events (``log_event``/``subscribe_topic``); cancelling sets a
  cluster-wide :class:`distributed.Event`, and a task that the scheduler
  released (its client went away) stops at its next progress call.
"""
from __future__ import annotations

import os
import queue as queue_mod
import re
import signal
import threading
import time
import traceback
import uuid
from dataclasses import dataclass
from typing import Any
from collections.abc import Callable, Iterator

from aspectus.progress import ProgressEvent  # noqa: F401 (re-exported)

#: approximate peak memory of one worker processing a clip (face mesh + buffers), MB
WORKER_MEMORY_MB = 700.0
#: smallest interval between two progress messages from one task, s
PROGRESS_INTERVAL_S = 0.25


@dataclass
class TaskOutcome:
    """What came back for one task.

    Attributes
    ----------
    key : str
        The task's key (the clip's output key).
    result : dict or None
        The task function's return value; None if it raised.
    error : str or None
        ``"ExceptionType: message"`` when the task raised or its worker died.
    traceback : str or None
        Formatted traceback of that error, when there is one.
    worker : str
        Which worker ran it (``"pid 1234"``, a Dask worker address).
    """

    key: str
    result: dict | None
    error: str | None = None
    traceback: str | None = None
    worker: str = ""


def default_workers(*, n_tasks: int | None = None, memory_per_worker_mb: float = WORKER_MEMORY_MB) -> int:
    """Number of local worker processes sized to this machine.

    Parameters
    ----------
    n_tasks : int, optional
        Number of clips to run; never more workers than clips.
    memory_per_worker_mb : float, default :data:`WORKER_MEMORY_MB`
        Memory one worker needs at its peak, in MB.

    Returns
    -------
    int
        ``min(usable cores, available memory / memory_per_worker_mb, n_tasks)``,
        at least 1.
    """
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    n = cores
    try:
        import psutil

        avail_mb = psutil.virtual_memory().available / 1e6
        n = min(n, max(1, int(avail_mb // memory_per_worker_mb)))
    except Exception:  # psutil missing or unsupported platform: cores only
        pass
    if n_tasks is not None:
        n = min(n, max(1, n_tasks))
    return max(1, n)


class _Throttle:
    """Forward progress at most every :data:`PROGRESS_INTERVAL_S` (always the last one)."""

    def __init__(self, send: Callable[[float, str], None]):
        self._send = send
        self._last = 0.0

    def __call__(self, fraction: float, message: str = "") -> None:
        now = time.monotonic()
        if fraction >= 1.0 or now - self._last >= PROGRESS_INTERVAL_S:
            self._last = now
            try:
                self._send(float(fraction), str(message))
            except Exception:  # progress must never break the work
                pass


# --------------------------------------------------------------------------------------------
# local process pool

_PARENT_PID: int | None = None


def _watch_parent(parent_pid: int, interval_s: float = 0.5) -> None:
    """Exit this worker when the coordinator process has gone (killed or crashed)."""
    while True:
        time.sleep(interval_s)
        alive = os.getppid() == parent_pid
        if alive and os.name == "nt":  # getppid does not change on Windows
            try:
                import psutil

                alive = psutil.pid_exists(parent_pid)
            except Exception:
                alive = True
        if not alive:
            os._exit(3)


_PROGRESS_QUEUE = None
_CANCEL_EVENT = None


def _init_local_worker(parent_pid: int, progress_queue, cancel_event) -> None:
    global _PARENT_PID, _PROGRESS_QUEUE, _CANCEL_EVENT
    _PARENT_PID = parent_pid
    _PROGRESS_QUEUE = progress_queue
    _CANCEL_EVENT = cancel_event
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    from aspectus._env import quiet_native_logs

    quiet_native_logs()
    threading.Thread(target=_watch_parent, args=(parent_pid,), daemon=True, name="aspectus-parent-watch").start()


def _local_call(fn, key: str, payload: Any) -> dict:
    worker = f"pid {os.getpid()}"
    q = _PROGRESS_QUEUE

    def send(fraction: float, message: str) -> None:
        q.put_nowait((key, worker, fraction, message))

    result = fn(payload, _Throttle(send), _CANCEL_EVENT)
    return {"worker": worker, "result": result}


class LocalEngine:
    """Clips across local worker processes.

    Parameters
    ----------
    workers : int, optional
        Number of worker processes; default :func:`default_workers`.
    start_method : {"spawn", "forkserver"}, default "spawn"
        Multiprocessing start method. ``fork`` is refused: the face mesh's
        native threads do not survive it.
    max_crashes : int, default 2
        A clip that was running when this many worker crashes happened is
        reported as failed instead of being retried again.
    """

    name = "local"

    def __init__(self, *, workers: int | None = None, start_method: str = "spawn", max_crashes: int = 2):
        if start_method not in ("spawn", "forkserver"):
            from aspectus.errors import ParameterError

            raise ParameterError(f"start_method must be 'spawn' or 'forkserver', not {start_method!r}")
        if workers is not None and int(workers) < 1:
            from aspectus.errors import ParameterError

            raise ParameterError(f"workers must be at least 1, not {workers}", hint="use --workers 1 or more")
        self.requested_workers = None if workers is None else int(workers)
        self.start_method = start_method
        self.max_crashes = int(max_crashes)
        self.n_workers = self.requested_workers or default_workers()

    def describe(self) -> str:
        return f"local process pool, {self.n_workers} worker(s)"

    def run(self, fn: Callable, payloads: dict[str, Any], *, on_progress: Callable[[ProgressEvent], None] | None = None,
            cancel=None) -> Iterator[TaskOutcome]:
        """Run ``fn`` on every payload; yield outcomes as tasks finish.

        Parameters
        ----------
        fn : callable
            Top-level (picklable) function ``fn(payload, progress, cancel) -> dict``.
        payloads : dict
            Task key -> picklable payload, run in this order.
        on_progress : callable, optional
            Called (in a coordinator thread) with each :class:`ProgressEvent`.
        cancel : object with ``is_set()``, optional
            When set, no further task starts and running tasks are asked to stop.
        """
        import concurrent.futures as cf
        import multiprocessing as mp
        from concurrent.futures.process import BrokenProcessPool

        todo = list(payloads)
        if not todo or (cancel is not None and cancel.is_set()):
            return
        n = min(self.requested_workers or default_workers(n_tasks=len(todo)), len(todo))
        self.n_workers = n
        ctx = mp.get_context(self.start_method)
        # plain queue and event handed to the workers at start-up: no manager process that could
        # outlive a killed coordinator
        pq = ctx.Queue()
        worker_cancel = ctx.Event()
        stop_drain = threading.Event()

        def drain() -> None:
            while not stop_drain.is_set():
                try:
                    item = pq.get(timeout=0.1)
                except queue_mod.Empty:
                    continue
                except (EOFError, OSError, ValueError):
                    return
                if on_progress is not None:
                    try:
                        on_progress(ProgressEvent(*item))
                    except Exception:
                        pass

        drainer = threading.Thread(target=drain, daemon=True, name="aspectus-progress")
        drainer.start()
        crashes: dict[str, int] = {}

        def new_pool():
            return cf.ProcessPoolExecutor(max_workers=n, mp_context=ctx, initializer=_init_local_worker,
                                          initargs=(os.getpid(), pq, worker_cancel))

        pool = new_pool()
        running: dict[cf.Future, str] = {}
        try:
            while todo or running:
                if cancel is not None and cancel.is_set():
                    worker_cancel.set()
                    todo.clear()
                while todo and len(running) < n:
                    key = todo.pop(0)
                    running[pool.submit(_local_call, fn, key, payloads[key])] = key
                if not running:
                    break
                done, _ = cf.wait(list(running), timeout=0.2, return_when=cf.FIRST_COMPLETED)
                broken = False
                for fut in done:
                    key = running.pop(fut)
                    try:
                        got = fut.result()
                    except BrokenProcessPool:
                        broken = True
                        crashes[key] = crashes.get(key, 0) + 1
                        if crashes[key] >= self.max_crashes:
                            yield TaskOutcome(key, None, error=f"worker process died {crashes[key]} times while "
                                              "this clip was running (crash or out of memory)", worker="")
                        else:
                            todo.insert(0, key)
                        continue
                    except Exception as exc:
                        yield TaskOutcome(key, None, error=f"{type(exc).__name__}: {exc}",
                                          traceback="".join(traceback.format_exception(exc)))
                        continue
                    yield TaskOutcome(key, got["result"], worker=got["worker"])
                if broken:
                    for fut, key in list(running.items()):
                        crashes[key] = crashes.get(key, 0) + 1
                        running.pop(fut)
                        if crashes[key] >= self.max_crashes:
                            yield TaskOutcome(key, None, error=f"worker process died {crashes[key]} times while "
                                              "this clip was running (crash or out of memory)")
                        else:
                            todo.insert(0, key)
                    pool.shutdown(wait=False, cancel_futures=True)
                    pool = new_pool()
        except BaseException:
            worker_cancel.set()
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
            stop_drain.set()
            drainer.join(timeout=2)
            pq.close()
            pq.join_thread()


# --------------------------------------------------------------------------------------------
# Dask

class _DaskCancel:
    """Cancel flag inside a Dask task: a cluster-wide Event, or the scheduler releasing the task."""

    def __init__(self, event_name: str, check_interval_s: float = 1.0):
        self._name = event_name
        self._interval = check_interval_s
        self._last = 0.0
        self._set = False
        self._event = None

    def is_set(self) -> bool:
        if self._set:
            return True
        now = time.monotonic()
        if now - self._last < self._interval:
            return False
        self._last = now
        try:
            from distributed import Event, get_worker
            from distributed.worker import thread_state

            w = get_worker()
            key = getattr(thread_state, "key", None)
            ts = w.state.tasks.get(key) if key is not None else None
            if ts is not None and ts.state not in ("executing", "long-running"):
                self._set = True  # released or cancelled by the scheduler: nobody wants the result
                return True
            if self._event is None:
                self._event = Event(self._name)
            self._set = bool(self._event.is_set())
        except Exception:
            pass
        return self._set


def _dask_call(fn, key: str, payload: Any, topic: str, cancel_name: str) -> dict:
    from distributed import get_worker

    w = get_worker()
    worker = str(w.address)

    def send(fraction: float, message: str) -> None:
        w.log_event(topic, {"key": key, "worker": worker, "fraction": fraction, "message": message})

    result = fn(payload, _Throttle(send), _DaskCancel(cancel_name))
    return {"worker": worker, "result": result}


_SCHEDULER_ADDRESS = re.compile(r"^(?:(?:tcp|tls|ws|wss|ucx)://)?[A-Za-z0-9_.\-]+(?::\d{1,5})?$|^(?:tcp|tls)://\[[0-9A-Fa-f:]+\](?::\d{1,5})?$|^inproc://\S+$")


def check_scheduler_address(address: str) -> str:
    """A one-line ParameterError unless ``address`` looks like a Dask scheduler address (before any wait)."""
    from aspectus.errors import ParameterError

    if not isinstance(address, str) or not _SCHEDULER_ADDRESS.match(address.strip()):
        raise ParameterError(f"--scheduler {address!r} is not a scheduler address",
                             hint="give tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786")
    return address


class DaskEngine:
    """Clips as tasks on a ``dask.distributed`` cluster.

    Parameters
    ----------
    address : str, optional
        Scheduler address, e.g. ``"tcp://10.0.0.5:8786"``. Workers must see
        the clips and the output folder under the same paths (a shared
        filesystem) and have aspectus installed in the same version.
    cluster : distributed.deploy.Cluster, optional
        An existing cluster object (e.g. a ``LocalCluster`` for testing);
        used instead of ``address``.
    client : distributed.Client, optional
        An existing client; used as is and not closed.
    connect_timeout_s : float, default 20
        How long to try reaching the scheduler, s.
    """

    name = "dask"

    def __init__(self, *, address: str | None = None, cluster=None, client=None, connect_timeout_s: float = 20.0):
        if address is None and cluster is None and client is None:
            from aspectus.errors import ParameterError

            raise ParameterError("the Dask engine needs a scheduler address, a cluster or a client")
        if address is not None:
            check_scheduler_address(address)
        self.address = address
        self.cluster = cluster
        self._client = client
        self.connect_timeout_s = float(connect_timeout_s)
        self.n_workers = 0

    def describe(self) -> str:
        where = self.address or getattr(self.cluster, "scheduler_address", None) or "existing client"
        return f"Dask cluster at {where}, {self.n_workers} worker(s)"

    def _connect(self):
        from distributed import Client

        from aspectus.errors import AspectusError

        if self._client is not None:
            return self._client, False
        target = self.cluster if self.cluster is not None else self.address
        try:
            client = Client(target, timeout=f"{self.connect_timeout_s}s", set_as_default=False)
        except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, and garbage from a non-Dask server
            first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
            raise AspectusError(f"cannot reach the Dask scheduler at {self.address} ({type(exc).__name__}: "
                               f"{first}) - start it with 'dask scheduler' and check the address and "
                               "firewall") from None
        return client, True

    def run(self, fn: Callable, payloads: dict[str, Any], *, on_progress: Callable[[ProgressEvent], None] | None = None,
            cancel=None) -> Iterator[TaskOutcome]:
        """Same contract as :meth:`LocalEngine.run`; ``fn`` runs on the cluster's workers."""
        if not payloads or (cancel is not None and cancel.is_set()):
            return
        from distributed import Event, as_completed

        client, own = self._connect()
        token = uuid.uuid4().hex[:12]
        topic = f"aspectus-progress-{token}"
        cancel_name = f"aspectus-cancel-{token}"
        try:
            self.n_workers = len(client.scheduler_info().get("workers", {}))
            if on_progress is not None:
                def handler(event) -> None:
                    _, msg = event
                    try:
                        on_progress(ProgressEvent(msg["key"], msg["worker"], msg["fraction"], msg["message"]))
                    except Exception:
                        pass

                client.subscribe_topic(topic, handler)
            stop = Event(cancel_name, client=client)
            futures = {}
            for key, payload in payloads.items():
                fut = client.submit(_dask_call, fn, key, payload, topic, cancel_name, pure=False,
                                    key=f"aspectus-clip-{key}-{token}")
                futures[fut] = key
            ac = as_completed(list(futures), with_results=False, loop=client.loop)
            cancelled = False
            pending = set(futures)
            while pending:
                if cancel is not None and cancel.is_set() and not cancelled:
                    cancelled = True
                    stop.set()
                    not_started = [f for f in pending if f.status == "pending"]
                    if not_started:
                        client.cancel(not_started)
                batch = ac.next_batch(block=False)
                if not batch:
                    time.sleep(0.1)
                    continue
                for fut in batch:
                    pending.discard(fut)
                    key = futures[fut]
                    if fut.status == "cancelled":
                        continue
                    try:
                        got = fut.result()
                    except Exception as exc:
                        yield TaskOutcome(key, None, error=f"{type(exc).__name__}: {exc}",
                                          traceback="".join(traceback.format_exception(exc)))
                        continue
                    yield TaskOutcome(key, got["result"], worker=got["worker"])
        except BaseException:
            try:
                Event(cancel_name, client=client).set()
            except Exception:
                pass
            raise
        finally:
            if on_progress is not None:
                try:
                    client.unsubscribe_topic(topic)
                except Exception:
                    pass
            if own:
                client.close()
