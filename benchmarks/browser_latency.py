"""The dashboard's speed as a user sees it: from a region change to its budget drawn.

    python benchmarks/browser_latency.py [--repeats 5]

Starts ``fluxfence serve`` on a free 127.0.0.1 port (the bundled invented sample event),
opens the page in headless Chromium (Debian's /usr/bin/chromium through Playwright), and
``--repeats`` times types a new box and presses "Add this box", timing from the click to the
new region's P − E series drawn in the page.  In the same run it times the engine alone on the
same boxes (fields already open, profiles on), so the page's overhead is plain to see.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from benchmarks.load_dashboard import served  # noqa: E402

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--no-first-run", "--disable-quic"]
DRAWN = """(name) => {
    const gd = document.querySelector('#series .js-plotly-plot');
    const title = gd && gd.layout && gd.layout.title && gd.layout.title.text;
    return gd && gd.data && gd.data.some(t => t.name === 'P − E') && title && title.includes(name);
}"""


def box(k: int):
    west, south = -6.0 + 1.5 * k, 38.0 + 0.5 * k
    return west, south, west + 9.0, south + 7.0


def page_times(url: str, repeats: int) -> list[float]:
    from playwright.sync_api import sync_playwright

    times = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
        page = browser.new_page(viewport={"width": 1440, "height": 1000})
        page.goto(url + "/")
        page.wait_for_function(DRAWN, arg="Sample basin", timeout=180_000)
        page.click("#adder-box summary")
        for k in range(repeats):
            for field, value in zip(("west", "south", "east", "north"), box(k)):
                page.fill(f"#box-{field}", str(value))
            t0 = time.perf_counter()
            page.click("#box-add")
            page.wait_for_function(DRAWN, arg=f"Typed box {k + 1}", timeout=120_000,
                                   polling="raf")
            times.append(time.perf_counter() - t0)
        browser.close()
    return times


def engine_times(repeats: int) -> list[float]:
    import sample_fields
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import load_region, region_from_bbox

    fields = open_fields(sample_fields.ensure_sample().levels)
    compute(fields, load_region(path=sample_fields.ensure_sample().basin), profiles=True)
    times = []
    for k in range(repeats):
        t0 = time.perf_counter()
        compute(fields, region_from_bbox(*box(k)), profiles=True, scheduler="sync").load()
        times.append(time.perf_counter() - t0)
    return times


def measure(repeats: int = 5) -> dict:
    """Page and engine times on the same boxes, in seconds."""
    with served() as (url, _):
        page = page_times(url, repeats)
    engine = engine_times(repeats)
    return {"page_median_s": statistics.median(page), "page_max_s": max(page),
            "engine_median_s": statistics.median(engine), "engine_max_s": max(engine),
            "repeats": repeats}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args(argv)
    out = measure(args.repeats)
    print(json.dumps(out, indent=1))
    print(f"a new box to its budget drawn in the browser: median {out['page_median_s']:.2f} s "
          f"(max {out['page_max_s']:.2f} s); the engine alone on the same boxes: median "
          f"{out['engine_median_s']:.3f} s (max {out['engine_max_s']:.3f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
