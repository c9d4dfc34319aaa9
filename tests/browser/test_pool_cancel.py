"""Cancel on the long-record path: a budget computed by the persistent worker pool (app/pool.py).

The sample (21 time steps) counts as a long record once the server's threshold is 5 steps, so
its budgets go to the pool's one spawned worker; the worker is paced (0.3 s per time step, one
step per block) so that the test can press Cancel while it runs, as the thread-path test
paces the engine.  Every test (through the app_page fixture) also checks that the page
logged no console error and made no request beyond 127.0.0.1.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from tests.browser.conftest import type_box, wait_for_series

pytestmark = pytest.mark.browser


@pytest.fixture
def pool_path(monkeypatch):
    """Budgets of the sample go to a fresh pool of one paced worker for this test."""
    from app import state
    from app.pool import ProcessPool

    st = state.current()
    monkeypatch.setattr(st, "settings", dataclasses.replace(st.settings, long_steps=5))
    pool = ProcessPool(1, pace=0.3)
    monkeypatch.setattr(st, "_pool", pool)
    yield st, pool
    pool.shutdown()


def _latest(st, name):
    """The job most recently submitted for the region called ``name`` (earlier tests of the
    session may have had their own "Typed box 1")."""
    return max((j for j in st.jobs._jobs.values() if j.label == name), key=lambda j: j.submitted)


def test_cancel_a_pool_job_frees_the_worker_and_leaves_no_result(app_page, pool_path):
    st, pool = pool_path
    page = app_page
    first, second = "Typed box 1", "Typed box 2"
    type_box(page, 2, 41, 6, 45)
    # the worker's own steps come back: 21 steps, one per block
    page.wait_for_function(
        "document.querySelector('#budget-progress-text').textContent.includes('of 21')",
        timeout=60_000)
    job = _latest(st, first)
    assert job.status == "running" and job.key in pool._listeners  # on the pool path
    workers = set(pool._pool._processes)
    assert len(workers) == 1

    page.click("#budget-cancel")
    page.wait_for_selector("#budget-again", state="visible", timeout=15_000)
    assert f"Cancelled: the budget of {first} was not computed" in page.inner_text(
        "#budget-message")
    assert job.status == "cancelled" and 0 < job.done < 21
    assert st.results.get(job.key) is None

    # the same worker is free again: unpaced, the next region's budget comes back from it
    pool.pace = 0.0
    type_box(page, 3, 40, 8, 44)
    wait_for_series(page, second, timeout=60_000)
    assert set(pool._pool._processes) == workers  # not restarted
    job2 = _latest(st, second)
    assert job2.status == "done" and (job2.done, job2.total) == (21, 21)
    # the numbers are the engine's for that box (budget.compute in this process)
    import budget
    from budget.region import region_from_bbox

    expected = budget.compute(budget.open_fields(st.checked_paths("0")),
                              region_from_bbox(3, 40, 8, 44))
    np.testing.assert_allclose(st.results.get(job2.key)["p_minus_e"].values,
                               expected["p_minus_e"].values, rtol=1e-12)

    # no stale result: the cancelled region stays cancelled, its panels say so
    assert st.results.get(job.key) is None
    page.click("#region-select")
    page.get_by_role("dialog").get_by_role("option", name=first, exact=True).click()
    page.wait_for_function(
        "document.querySelector('#budget-message').textContent.includes('Cancelled')",
        timeout=15_000)
    title = page.evaluate("() => document.querySelector('#series .js-plotly-plot')"
                          ".layout.annotations.map(a => a.text).join(' ')")
    assert f"The budget of {first} was cancelled" in title
    assert page.is_disabled("#dl-csv")
