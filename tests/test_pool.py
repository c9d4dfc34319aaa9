"""Long records go to a small pool of persistent worker processes (app/pool.py)."""

from __future__ import annotations

import numpy as np


def test_long_records_are_computed_by_the_same_persistent_workers(tmp_path):
    from app import callbacks, server, state
    from app.regions import record
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox, region_from_geojson

    # the sample has 21 steps: with long_steps=5 it counts as a long record
    server.create_app(cache_dir=tmp_path / "cache", pool_workers=1, long_steps=5)
    st = state.current()
    try:
        pids = []
        for k, box in enumerate(((0, 40, 8, 46), (2, 41, 9, 47))):
            rec = record(region_from_bbox(*box), f"r{k + 1}", f"Long box {k + 1}")
            want = callbacks.request_budget(rec["id"], "boundary", "0", [rec], "default", None)
            job = st.jobs.get(want["key"])
            assert job.wait(300) and job.status == "done", job.message
            assert (job.done, job.total) == (21, 21)  # the worker's real steps came back
            got = st.results.get(want["key"])
            expected = compute(open_fields(st.checked_paths("0")),
                               region_from_geojson(rec["geojson"]))
            np.testing.assert_allclose(got["p_minus_e"].values, expected["p_minus_e"].values,
                                       rtol=1e-12)
            pids.append(set(st.pool()._pool._processes))
        # one worker, started once and kept for the second job
        assert len(pids[0]) == 1 and pids[0] == pids[1]
    finally:
        st.shutdown()
