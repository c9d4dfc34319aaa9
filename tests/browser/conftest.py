"""Playwright fixtures: Debian's Chromium, the dashboard served inside the test process.

Never `playwright install`: the launch args point pytest-playwright at /usr/bin/chromium.
Each test gets a fresh page that records console errors and every request URL, and saves a
screenshot under a temporary folder (printed at the end of the session).
"""

from __future__ import annotations

import contextlib
import threading
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    if not Path(CHROMIUM).exists():
        pytest.fail("The browser tests need Debian's Chromium at /usr/bin/chromium: "
                    "apt-get install -y chromium (never `playwright install`).", pytrace=False)
    return {
        **browser_type_launch_args,
        "executable_path": CHROMIUM,
        "headless": True,
        "args": [
            "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--no-first-run", "--disable-quic",
        ],
    }


@pytest.fixture(scope="session")
def browser_context_args(browser_context_args):
    return {**browser_context_args, "viewport": {"width": 1440, "height": 1000},
            "accept_downloads": True}


@pytest.fixture(scope="session")
def shots_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("screenshots")
    yield folder
    print(f"\nscreenshots: {folder}")


@pytest.fixture(scope="session")
def dashboard(tmp_path_factory):
    """The sample-event dashboard on a free 127.0.0.1 port, with its own cache folder."""
    from werkzeug.serving import make_server

    from app.server import create_app

    cache = tmp_path_factory.mktemp("dash-cache")
    app = create_app(cache_dir=cache)
    from app.state import current

    current().fields("0")  # the sample's fields open before the first page (as serve warms)
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    url = f"http://127.0.0.1:{server.server_port}"
    yield {"url": url, "app": app, "cache": Path(cache)}
    server.shutdown()


class Watch:
    """Console errors, uncaught page errors and every request the page makes."""

    def __init__(self, page, base_url):
        self.base = base_url
        self.errors: list[str] = []
        self.requests: list[str] = []
        page.on("console", lambda m: self.errors.append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: self.errors.append(f"page error: {e}"))
        page.on("request", lambda r: self.requests.append(r.url))

    def outside(self) -> list[str]:
        ok = (self.base + "/", "data:", "blob:")
        return [u for u in self.requests if not u.startswith(ok) and u != self.base]


@pytest.fixture
def app_page(page, dashboard, shots_dir, request):
    """The dashboard opened and its first map drawn; a screenshot is saved after the test."""
    watch = Watch(page, dashboard["url"])
    page.goto(dashboard["url"] + "/")
    page.wait_for_selector("#map .heatmaplayer image, #map .hm image", timeout=90_000)
    page.wait_for_function("document.querySelector('#time-label').textContent.length > 0")
    # the sample opens with its basin selected: let that first job finish (cached after the
    # first test), so a cold start's worker does not race the test's own requests
    wait_for_series(page, "Sample basin", timeout=120_000)
    page.watch = watch
    yield page
    page.screenshot(path=str(shots_dir / f"{request.node.name}.png"), full_page=True)
    assert not watch.errors, f"console errors: {watch.errors}"
    assert not watch.outside(), f"requests left 127.0.0.1: {watch.outside()}"


# ---------------------------------------------------------------------------------------------
# helpers shared by the tests
# ---------------------------------------------------------------------------------------------
def to_pixels(page, lon: float, lat: float) -> tuple[float, float]:
    """Page pixel coordinates of a lon/lat point on the map (BROWSER.md recipe)."""
    return tuple(page.evaluate(
        """([lon, lat]) => {
            const gd = document.querySelector('#map .js-plotly-plot');
            const fl = gd._fullLayout, box = gd.getBoundingClientRect();
            return [box.left + fl.xaxis._offset + fl.xaxis.l2p(lon),
                    box.top + fl.yaxis._offset + fl.yaxis.l2p(lat)];
        }""",
        [lon, lat],
    ))


def graph_traces(page, graph_id: str) -> list[dict]:
    return page.evaluate(
        """(id) => {
            const gd = document.querySelector('#' + id + ' .js-plotly-plot');
            const arr = (a) => (a && typeof a.length === 'number') ? Array.from(a) : a;
            return gd && gd._fullData ? gd._fullData.map(t => ({name: t.name, x: arr(t.x), y: arr(t.y),
                                                     type: t.type})) : [];
        }""",
        graph_id,
    )


def wait_for_series(page, name, timeout=60_000):
    """Wait until the budget series of the region called ``name`` shows data (its background
    job has finished); the sample opens with its basin's series, so the name matters."""
    page.wait_for_function(
        """(name) => {
            const gd = document.querySelector('#series .js-plotly-plot');
            const title = gd && gd.layout && gd.layout.title && gd.layout.title.text;
            return gd && gd.data && gd.data.some(t => t.name === 'P − E')
                && title && title.includes(name);
        }""",
        arg=name, timeout=timeout,
    )


def type_box(page, west, south, east, north):
    """Add a box through the "Type a box" form (it becomes "Typed box N")."""
    if not page.is_visible("#box-west"):
        page.click("#adder-box summary")
    for field, value in (("west", west), ("south", south), ("east", east), ("north", north)):
        page.fill(f"#box-{field}", str(value))
    page.click("#box-add")


_SERVE = """
import json, sys
from werkzeug.serving import make_server
from app.server import create_app
app = create_app(cache_dir=sys.argv[1], **json.loads(sys.argv[2]))
server = make_server("127.0.0.1", 0, app.server, threaded=True)
print(server.server_port, flush=True)
server.serve_forever()
"""


@contextlib.contextmanager
def own_dashboard(cache_dir, **create_app_args):
    """A dashboard in its own process (Dash's callbacks and the server's state are per process,
    so the session's sample dashboard is left alone); yields its URL, stops it on the way out.
    ``create_app_args`` are create_app's (paths=[...], data_dir=...), as JSON."""
    import json
    import os
    import subprocess
    import sys

    args = json.dumps({k: (list(map(str, v)) if isinstance(v, list) else str(v))
                       for k, v in create_app_args.items()})
    proc = subprocess.Popen([sys.executable, "-c", _SERVE, str(cache_dir), args],
                            stdout=subprocess.PIPE, text=True, env=dict(os.environ))
    try:
        yield f"http://127.0.0.1:{int(proc.stdout.readline())}"
    finally:
        proc.terminate()
        proc.wait(timeout=30)
