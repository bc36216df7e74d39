"""The batch progress board: one line per running clip and an overall bar."""
from __future__ import annotations

import contextlib
import threading
from typing import Any
from collections.abc import Callable

from aspectus.progress import ProgressBar, WeightedProgress








class _Board:
    """Study bar plus one bar per worker (tqdm), fed from engine threads; time remaining from tqdm."""

    def __init__(self, *, weights: dict[str, float], n_workers: int, enabled: bool,
                 callback: Callable[[float, str], None] | None):
        self.weights = weights
        self.share = WeightedProgress(keys=list(weights), weights=weights)
        self.counts = {"done": 0, "failed": 0, "pending": 0}
        self.n_all = len(weights)
        self.callback = callback
        self.enabled = enabled
        self.worker_bars: dict[str, Any] = {}
        self.n_workers = max(1, n_workers)
        self.bar = None
        self._lock = threading.Lock()  # fed from the engine's progress thread and the coordinator
        if enabled:
            self.bar = ProgressBar(total=1000, desc="study", position=0, leave=True, dynamic_ncols=True,
                            bar_format="{desc} {percentage:3.0f}%|{bar}| [{elapsed}<{remaining}]")
            self._postfix()

    def _postfix(self) -> None:
        if self.bar is not None:
            c = self.counts
            self.bar.set_description_str(f"study: {c['done'] + c['failed']}/{self.n_all} clips, {c['failed']} failed",
                                         refresh=False)

    def _overall(self) -> float:
        return self.share.overall()

    def _push(self, message: str) -> None:
        share = self._overall()
        if self.bar is not None:
            n = int(round(share * 1000))
            if n > self.bar.n:
                self.bar.update(n - self.bar.n)
            self._postfix()
            self.bar.refresh()
        if self.callback is not None:
            with contextlib.suppress(Exception):
                self.callback(share, message)

    def on_progress(self, ev) -> None:
        with self._lock:
            self._on_progress(ev)

    def _on_progress(self, ev) -> None:
        self.share.update(ev.key, min(1.0, float(ev.fraction)) * 0.999)
        if self.bar is not None:
            wb = self.worker_bars.get(ev.worker)
            if wb is None and len(self.worker_bars) < 16:
                wb = ProgressBar(total=100, position=len(self.worker_bars) + 1, leave=False, dynamic_ncols=True,
                                bar_format="  {desc} {percentage:3.0f}%|{bar}|")
                self.worker_bars[ev.worker] = wb
            if wb is not None:
                msg = ev.message.split(": ", 1)[-1] if ev.message.startswith(ev.key) else ev.message
                wb.set_description_str(f"{ev.key[:28]}: {msg[:36]:<36}", refresh=False)
                wb.n = int(round(100 * min(1.0, ev.fraction)))
                wb.refresh()
        self._push(f"{ev.key}: {ev.message}")

    def finished(self, key: str, status: str) -> None:
        with self._lock:
            self.share.finish(key, status)
            if status in self.counts:
                self.counts[status] += 1
            self._push(f"{key}: {status}")

    def close(self) -> None:
        for wb in self.worker_bars.values():
            wb.close()
        if self.bar is not None:
            self.bar.close()
