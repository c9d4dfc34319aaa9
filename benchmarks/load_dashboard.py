"""Many users at once: each simulated user asks the dashboard for the budget of its own box.

    python benchmarks/load_dashboard.py [--users 20] [--workers 8] [--job-threads 2]

The benchmark starts ``fluxfence serve`` on a free 127.0.0.1 port (the bundled invented
sample event), reads the callback ids from ``/_dash-dependencies`` and then runs one thread per
user, all started together, each sending the same POSTs to ``/_dash-update-component`` that
the page sends when a region is chosen: the budget request, then the panels, then (while the
budget is still computing) the panels again at the page's poll interval until the budget is
drawn.  It reports the time from the request to the drawn budget (p50, p95, max), the
server's resident memory at the end, and how many jobs were refused or failed.  Requests go to
127.0.0.1 only, every user stops after its budget or after ``--give-up`` seconds, and the
server is stopped at the end.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import socket
import subprocess
import sys
import threading
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

POLL_SECONDS = 0.3  # the page's poll interval (app/layout.py, budget-poll)


def _post(url: str, payload: dict, timeout: float = 60.0) -> dict:
    req = urllib.request.Request(url + "/_dash-update-component",
                                 data=json.dumps(payload).encode(),
                                 headers={"Content-Type": "application/json"})
    with urllib.request.urlopen(req, timeout=timeout) as resp:
        body = resp.read()
    return json.loads(body) if body else {}


def array_values(array) -> list:
    """A figure array from the JSON the page receives: a list, or Plotly's typed-array form
    {"dtype": "f8", "bdata": base64}."""
    if isinstance(array, dict) and "bdata" in array:
        import base64

        import numpy as np

        return np.frombuffer(base64.b64decode(array["bdata"]), dtype=array["dtype"]).tolist()
    return list(array)


def _outputs(dep: dict) -> list[str]:
    """The outputs of a dependency as id.property (a duplicate-allowed output carries @hash)."""
    return [o.split("@")[0] for o in dep["output"].strip(".").split("...")]


class Page:
    """The three budget callbacks of the dashboard (request, show, poll), called as the page
    calls them."""

    def __init__(self, url: str):
        self.url = url
        with urllib.request.urlopen(url + "/_dash-dependencies", timeout=30) as resp:
            deps = json.loads(resp.read())
        self.request = next(d for d in deps if "want.data" in _outputs(d))
        self.show = next(d for d in deps if "series.figure" in _outputs(d))
        self.poll = next(d for d in deps if "budget-ready.data" in _outputs(d))

    @staticmethod
    def _payload(dep: dict, values: dict, changed: str) -> dict:
        def fill(items):
            return [dict(i, value=values.get(f"{i['id']}.{i['property']}")) for i in items]

        outputs = [dict(zip(("id", "property"), o.rsplit(".", 1)))
                   for o in dep["output"].strip(".").split("...")]
        return {"output": dep["output"],
                "outputs": outputs if len(outputs) > 1 else outputs[0],
                "inputs": fill(dep["inputs"]), "state": fill(dep.get("state", [])),
                "changedPropIds": [changed]}

    def budget(self, record: dict, give_up: float = 120.0) -> dict:
        """Choose ``record`` and wait for its budget: {"seconds", "polls", "pme", "message"}."""
        t0 = time.perf_counter()
        values = {"region-select.value": record["id"], "method.value": "boundary",
                  "source.value": "0", "regions.data": [record], "correction.value": "default",
                  "budget-again.n_clicks": None}
        want = _post(self.url, self._payload(self.request, values, "region-select.value"))
        want = want["response"]["want"]["data"]
        values = {"want.data": want, "units.value": "mm/day", "time.value": 0,
                  "period.value": [0, 20], "budget-kind.value": "vapour",
                  "budget-ready.data": None, "budget-poll.n_intervals": 0}
        polls = 0
        out = _post(self.url, self._payload(self.show, values, "want.data"))["response"]
        while True:
            series = out.get("series", {}).get("figure")
            if series and any(t.get("name") == "P − E" for t in series.get("data", [])):
                pme = array_values(next(t for t in series["data"] if t.get("name") == "P − E")["y"])
                return {"seconds": time.perf_counter() - t0, "polls": polls, "pme": pme,
                        "message": out.get("budget-message", {}).get("children", "")}
            message = out.get("budget-message", {}).get("children")
            if message and out.get("budget-poll", {}).get("disabled", False):
                return {"seconds": time.perf_counter() - t0, "polls": polls, "pme": None,
                        "message": message}
            if time.perf_counter() - t0 > give_up:
                return {"seconds": time.perf_counter() - t0, "polls": polls, "pme": None,
                        "message": "gave up"}
            time.sleep(POLL_SECONDS)
            polls += 1
            values["budget-poll.n_intervals"] = polls
            tick = _post(self.url, self._payload(self.poll, values, "budget-poll.n_intervals"))
            ready = tick.get("response", {}).get("budget-ready", {}).get("data")
            if ready:  # the job has ended: the page draws its panels
                values["budget-ready.data"] = ready
                out = _post(self.url, self._payload(self.show, values, "budget-ready.data"))["response"]


def boxes(n: int) -> list[dict]:
    """``n`` different boxes inside the sample's grid (-10..20 °E, 35..55 °N), as page records."""
    from app.regions import record
    from budget.region import region_from_bbox

    out = []
    for k in range(n):
        west = -8.0 + (k % 5) * 2.5
        south = 37.0 + (k // 5) * 2.0
        out.append(record(region_from_bbox(west, south, west + 8.0 + 0.1 * k, south + 6.0),
                          f"r{k + 1}", f"Load box {k + 1}"))
    return out


def run_users(url: str, users: int, give_up: float = 120.0) -> list[dict]:
    """Every user at once, each with its own box; results in user order."""
    page = Page(url)
    records = boxes(users)
    results: list = [None] * users
    start = threading.Barrier(users)

    def user(k):
        start.wait()
        try:
            results[k] = page.budget(records[k], give_up)
        except Exception as exc:  # noqa: BLE001 - a failed request is counted, not raised
            results[k] = {"seconds": float("nan"), "polls": 0, "pme": None,
                          "message": f"{type(exc).__name__}: {exc}"}

    threads = [threading.Thread(target=user, args=(k,), daemon=True) for k in range(users)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(give_up + 30)
    return results


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _rss_mib(pid: int) -> float:
    import psutil

    proc = psutil.Process(pid)
    return sum(p.memory_info().rss for p in [proc, *proc.children(recursive=True)]) / 2**20


def _wait_up(url: str, proc, seconds: float = 120.0) -> None:
    t0 = time.time()
    while time.time() - t0 < seconds:
        if proc.poll() is not None:
            raise SystemExit("the dashboard stopped before it answered")
        try:
            with urllib.request.urlopen(url + "/_dash-layout", timeout=5):
                return
        except OSError:
            time.sleep(0.5)
    raise SystemExit("the dashboard did not answer within two minutes")


@contextlib.contextmanager
def served(*options: str):
    """``fluxfence serve`` on a free 127.0.0.1 port with ``options``: yields (url, process) once
    the page answers, and stops the server on the way out."""
    port = _free_port()
    url = f"http://127.0.0.1:{port}"
    proc = subprocess.Popen([sys.executable, "-m", "app.cli", "serve", "--port", str(port), *options],
                            cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(ROOT)),
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        _wait_up(url, proc)
        yield url, proc
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()


def summarise(results: list[dict]) -> dict:
    import numpy as np

    ok = [r["seconds"] for r in results if r and r["pme"] is not None]
    bad = [r["message"] for r in results if not r or r["pme"] is None]
    arr = np.asarray(ok, float)
    pct = (lambda q: float(np.percentile(arr, q))) if arr.size else (lambda q: float("nan"))
    return {"users": len(results), "drawn": len(ok), "failed": len(bad), "p50_s": pct(50),
            "p95_s": pct(95), "max_s": float(arr.max()) if arr.size else float("nan"),
            "problems": bad[:3]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--users", type=int, default=20)
    ap.add_argument("--workers", type=int, default=8)
    ap.add_argument("--job-threads", type=int, default=2)
    ap.add_argument("--give-up", type=float, default=120.0)
    args = ap.parse_args(argv)
    with served("--workers", str(args.workers), "--job-threads", str(args.job_threads)) as (url, proc):
        Page(url).budget(boxes(1)[0])  # the first budget opens the fields (a cold start)
        before = _rss_mib(proc.pid)
        summary = summarise(run_users(url, args.users, args.give_up))
        summary.update(rss_before_mib=before, rss_after_mib=_rss_mib(proc.pid),
                       workers=args.workers, job_threads=args.job_threads)
    print(json.dumps(summary, indent=1))
    print(f"{summary['users']} users, each its own box on the sample: p50 "
          f"{summary['p50_s']:.2f} s, p95 {summary['p95_s']:.2f} s, max {summary['max_s']:.2f} s "
          f"to the drawn budget; {summary['failed']} failed; server memory "
          f"{summary['rss_after_mib']:.0f} MiB ({args.workers} request threads, "
          f"{args.job_threads} budget threads)")
    return 0 if summary["failed"] == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
