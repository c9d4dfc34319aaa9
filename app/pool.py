"""Long records: a small, fixed pool of persistent worker processes that keep their fields open.

A budget of a long record (many time steps) would hold a server thread, and the GIL, for
long; such jobs go to this pool instead.  Each worker is a *spawned* process (a fork of the
threaded web server could inherit a held lock), started once and reused for every job: it
opens a field set on its first job and keeps it open for the next.  The job's thread in the
server (app.jobs) waits for the result; progress comes back through a queue and is passed to
the job's ``progress``; Cancel leaves a marker file that the worker sees at its next block.
"""

from __future__ import annotations

import os
import tempfile
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from .jobs import Cancelled

_WORKER: dict = {}  # inside a worker process: its queue, marker folder and opened fields


def _init(queue, marker_dir: str) -> None:
    _WORKER.update(queue=queue, markers=marker_dir, fields={})


def _compute(key: str, paths: tuple, geojson: dict, name: str, options, pace: float = 0.0):
    """Runs in a worker: the budget of one region (``options``: budget.options.BudgetOptions,
    as the server's threads use them), fields opened once per worker."""
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.options import RunOptions
    from budget.region import region_from_geojson

    fields = _WORKER["fields"].get(paths)
    if fields is None:
        fields = _WORKER["fields"][paths] = open_fields(list(paths))
    marker = Path(_WORKER["markers"]) / key

    def progress(done, total):
        _WORKER["queue"].put((key, int(done), int(total)))
        if marker.exists():
            raise Cancelled()
        if pace and done < total:
            time.sleep(pace)

    run = RunOptions(scheduler="sync", progress=progress, block_steps=1 if pace else None)
    ds = compute(fields, region_from_geojson(geojson, name=name), options=options, run=run)
    return ds.load()


class ProcessPool:
    """``workers`` persistent spawned processes computing budgets of long records."""

    def __init__(self, workers: int = 1, pace: float = 0.0):
        from multiprocessing import get_context

        ctx = get_context("spawn")
        self.workers = max(1, int(workers))
        #: seconds a worker waits at each time step, one step per block (0: none; a test sets
        #: it to press Cancel while a job runs, as it paces the engine in the server's threads)
        self.pace = float(pace)
        self._queue = ctx.Queue()
        self._markers = tempfile.mkdtemp(prefix="fluxfence-cancel-")
        self._pool = ProcessPoolExecutor(self.workers, mp_context=ctx, initializer=_init,
                                         initargs=(self._queue, self._markers))
        self._listeners: dict = {}
        self._lock = threading.Lock()
        threading.Thread(target=self._drain, name="fluxfence-pool-progress",
                         daemon=True).start()

    def _drain(self) -> None:
        while True:
            try:
                item = self._queue.get()
            except (EOFError, OSError):
                return
            if item is None:
                return
            key, done, total = item
            with self._lock:
                listener = self._listeners.get(key)
            if listener is not None:
                try:
                    listener(done, total)
                except Cancelled:
                    (Path(self._markers) / key).touch()

    def run(self, key: str, progress, paths, geojson, name, options):
        """Compute in a worker and wait; ``progress`` is called with the worker's steps (it
        raises Cancelled after Cancel, which tells the worker to stop)."""
        marker = Path(self._markers) / key
        marker.unlink(missing_ok=True)
        with self._lock:
            self._listeners[key] = progress
        try:
            future = self._pool.submit(_compute, key, tuple(paths), geojson, name, options,
                                       self.pace)
            while True:
                try:
                    return future.result(timeout=0.25)
                except TimeoutError:
                    try:
                        progress(None, None)  # only asks whether the job was cancelled
                    except Cancelled:
                        marker.touch()
        finally:
            with self._lock:
                self._listeners.pop(key, None)

    def shutdown(self) -> None:
        self._pool.shutdown(wait=False, cancel_futures=True)
        try:
            self._queue.put(None)
        except (OSError, ValueError):
            pass
        for p in Path(self._markers).glob("*"):
            p.unlink(missing_ok=True)
        try:
            os.rmdir(self._markers)
        except OSError:
            pass
