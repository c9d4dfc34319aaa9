"""The dashboard's job runner (app/jobs.py): keyed jobs in a thread pool, real progress, Cancel."""

from __future__ import annotations

import threading

from app.jobs import CANCELLED, DONE, FAILED, JobRunner


def _steps(n, gate=None):
    def work(progress):
        for k in range(n + 1):
            progress(k, n)
            if gate is not None and k == 1:
                gate.wait(10)
        return n
    return work


def test_a_job_reports_its_steps_and_stores_its_result():
    runner = JobRunner(2)
    got = {}
    job = runner.submit("a", "A", _steps(5), lambda r: got.update(a=r), str)
    assert job.wait(10) and job.status == DONE
    assert (job.done, job.total) == (5, 5) and got == {"a": 5}
    runner.shutdown()


def test_the_same_key_is_computed_once_while_it_runs():
    runner = JobRunner(2)
    gate = threading.Event()
    first = runner.submit("k", "K", _steps(3, gate), lambda r: None, str)
    again = runner.submit("k", "K", _steps(3), lambda r: None, str)
    assert again is first
    gate.set()
    assert first.wait(10) and first.status == DONE
    runner.shutdown()


def test_cancel_stops_the_job_at_its_next_step_and_nothing_is_stored():
    runner = JobRunner(1)
    gate = threading.Event()
    stored = []
    job = runner.submit("c", "C", _steps(50, gate), stored.append, str)
    while job.done < 1:
        threading.Event().wait(0.01)
    runner.cancel("c")
    gate.set()
    assert job.wait(10) and job.status == CANCELLED
    assert job.done < 50 and stored == []
    # a cancelled job stays cancelled (the page says so) until it is asked for again
    assert runner.submit("c", "C", _steps(2), stored.append, str) is job
    again = runner.submit("c", "C", _steps(2), stored.append, str, again=True)
    assert again.wait(10) and again.status == DONE and stored == [2]
    runner.shutdown()


def test_a_failure_becomes_one_sentence():
    runner = JobRunner(1)

    def broken(progress):
        raise ValueError("boom")

    job = runner.submit("f", "F", broken, lambda r: None, lambda e: f"It failed: {e}.")
    assert job.wait(10) and job.status == FAILED and job.message == "It failed: boom."
    runner.shutdown()
