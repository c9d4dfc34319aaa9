"""Budget jobs of the dashboard: computed in a small pool of threads of the server process.

A job is one call of a work function ``work(progress)`` that returns a result; ``progress(done,
total)`` reports real steps (the engine's time steps, once per time block) and raises
``Cancelled`` once the job has been cancelled, so the engine stops at the next block.  Jobs
are keyed (the budget cache key): asking for a key that is queued or running returns that job
instead of starting a second one.  The fields the work reads are opened once by the server
(app.state) and shared, so a short job costs only its computation.
"""

from __future__ import annotations

import logging
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Callable

log = logging.getLogger("fluxfence.app")

QUEUED, RUNNING, DONE, FAILED, CANCELLED = "queued", "running", "done", "failed", "cancelled"


class Cancelled(Exception):
    """Raised inside a job's progress callback once the job was cancelled."""


@dataclass
class Job:
    key: str
    label: str
    status: str = QUEUED
    done: int = 0
    total: int = 0
    message: str = ""
    submitted: float = field(default_factory=time.monotonic)
    finished: float | None = None
    _cancel: threading.Event = field(default_factory=threading.Event, repr=False)
    _over: threading.Event = field(default_factory=threading.Event, repr=False)

    @property
    def pending(self) -> bool:
        return self.status in (QUEUED, RUNNING)

    def wait(self, timeout: float) -> bool:
        """Wait up to ``timeout`` seconds for the job to end; True when it has."""
        return self._over.wait(timeout)


class JobRunner:
    """A bounded pool of threads running keyed jobs; finished jobs are forgotten after a while."""

    def __init__(self, threads: int = 2, keep_seconds: float = 3600.0):
        self.threads = max(1, int(threads))
        self._pool = ThreadPoolExecutor(self.threads, thread_name_prefix="fluxfence-job")
        self._jobs: dict[str, Job] = {}
        self._lock = threading.Lock()
        self._keep = keep_seconds

    def get(self, key: str) -> Job | None:
        with self._lock:
            return self._jobs.get(key)

    def submit(self, key: str, label: str, work: Callable, on_result: Callable,
               describe_error: Callable[[BaseException], str], again: bool = False) -> Job:
        """Start ``work`` for ``key`` unless it is queued or running already, or it failed or
        was cancelled and ``again`` is false (the page then shows why).

        ``on_result(result)`` stores the result (called in the job's thread before the job is
        marked done); ``describe_error(exc)`` turns a failure into one sentence for the page.
        """
        with self._lock:
            self._forget_old()
            job = self._jobs.get(key)
            if job is not None and (job.pending or (job.status in (FAILED, CANCELLED)
                                                    and not again)):
                return job
            job = Job(key=key, label=label)
            self._jobs[key] = job
        self._pool.submit(self._run, job, work, on_result, describe_error)
        return job

    def cancel(self, key: str) -> Job | None:
        job = self.get(key)
        if job is not None and job.pending:
            job._cancel.set()
            if job.status == QUEUED:  # not started: it ends as soon as a thread picks it up
                self._end(job, CANCELLED, "")
        return job

    def shutdown(self) -> None:
        with self._lock:
            for job in self._jobs.values():
                job._cancel.set()
        self._pool.shutdown(wait=False, cancel_futures=True)

    # -- inside the pool ----------------------------------------------------------------------
    def _run(self, job: Job, work, on_result, describe_error) -> None:
        if job._cancel.is_set():
            self._end(job, CANCELLED, "")
            return
        job.status = RUNNING

        def progress(done, total):
            if done is not None:  # None: only asks whether the job was cancelled
                job.done, job.total = int(done), int(total)
            if job._cancel.is_set():
                raise Cancelled()

        try:
            result = work(progress)
            if job._cancel.is_set():
                raise Cancelled()
            on_result(result)
            self._end(job, DONE, "")
        except Cancelled:
            self._end(job, CANCELLED, "")
        except Exception as exc:  # noqa: BLE001 - every failure becomes one sentence
            self._end(job, FAILED, describe_error(exc))

    def _end(self, job: Job, status: str, message: str) -> None:
        if job._over.is_set():
            return
        job.status, job.message, job.finished = status, message, time.monotonic()
        job._over.set()

    def _forget_old(self) -> None:
        now = time.monotonic()
        for key in [k for k, j in self._jobs.items()
                    if j.finished is not None and now - j.finished > self._keep]:
            del self._jobs[key]
