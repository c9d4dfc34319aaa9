"""The many-users load test (benchmarks/load_dashboard.py) with a small bound, in-process.

Four simulated users at once, each choosing its own box, through the same HTTP requests the
page sends, against the app served by waitress on 127.0.0.1.  Timing figures belong to the
benchmark, not here: this checks that every user gets the engine's own budget of its box, that
each box is computed exactly once, and that nothing fails.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    import waitress.server

    import importlib
    import sys

    from dash import _callback

    from app.server import create_app
    from app.state import current

    # Dash hands its globally registered callbacks to the first app only; when the browser
    # tests built theirs earlier in this process, register them again for this one.
    names = ["app.callbacks", "app.callbacks_attribution", "app.callbacks_report", "app.regions"]
    if all(n in sys.modules for n in names) and not _callback.GLOBAL_CALLBACK_LIST:
        for n in names:
            importlib.reload(sys.modules[n])
    app = create_app(cache_dir=tmp_path_factory.mktemp("load-cache"), job_threads=2)
    current().fields("0")
    server = waitress.server.create_server(app.server, host="127.0.0.1", port=0, threads=4)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.effective_port}"
    server.close()


def test_four_users_each_get_the_engine_budget_of_their_own_box(served):
    from benchmarks.load_dashboard import boxes, run_users, summarise

    from app.state import current
    from budget.ledger import compute
    from budget.region import region_from_geojson

    users = 4
    results = run_users(served, users, give_up=300)
    summary = summarise(results)
    assert summary["failed"] == 0, summary["problems"]
    st = current()
    for rec, got in zip(boxes(users), results):
        # the page's P − E (mm/day) is the engine's, × 86400 (CHECKS.md, conversions)
        expected = compute(st.fields("0"), region_from_geojson(rec["geojson"]))
        np.testing.assert_allclose(got["pme"], expected["p_minus_e"].values * 86400,
                                   rtol=1e-9)
    # one job per box, each computed once (no restarts)
    labels = [j.label for j in st.jobs._jobs.values()]
    assert sorted(labels) == sorted(r["name"] for r in boxes(users))
    assert all(j.status == "done" for j in st.jobs._jobs.values())
