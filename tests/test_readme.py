"""Every fenced shell and Python block of README.md runs as written (so that none can rot).

The blocks run in README order in one temporary folder, as a reader following the README would:
shell blocks with bash (`fluxfence` is this checkout's CLI), Python blocks in a fresh
interpreter. Files a block names that a reader brings themselves are written here first, all
invented and labelled so: `basins.geojson` (two basins), `era5_*.nc` (two water years of daily
fields) and `gauge.csv` (a gauge record). Blocks that cannot run in a test are listed in
NOT_RUN with the reason, and the number of blocks run is asserted. Each `--out` a run block
names must exist afterwards.

The values are not checked here (every command has its own reference tests); this checks that
the README's commands and code work as printed.
"""

from __future__ import annotations

import json
import os
import re
import shlex
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

README = Path(__file__).resolve().parent.parent / "README.md"
FENCE = re.compile(r"^```(\w+)[^\n]*\n(.*?)^```[ \t]*$", re.S | re.M)

#: Blocks that are not run, by their first line, with the reason.
NOT_RUN = {
    "pip install -e . && fluxfence serve": "installs the package and starts a server that runs until stopped",
    "scripts/test.sh": "runs this test suite itself (and installs Chromium)",
    "fluxfence serve              # the invented sample event at http://127.0.0.1:8050":
        "starts servers that run until stopped (the dashboard has its browser tests)",
}
#: How many blocks run (update with the README).
RUN_COUNT = 7


def blocks() -> list[tuple[int, str, str]]:
    """(line number, language, text) of each fenced block of README.md."""
    text = README.read_text(encoding="utf-8")
    return [(text[: m.start()].count("\n") + 1, m.group(1), m.group(2)) for m in FENCE.finditer(text)]


def runnable() -> list[tuple[int, str, str]]:
    return [b for b in blocks() if b[1] in ("sh", "python") and b[2].splitlines()[0].strip() not in NOT_RUN]


def test_every_block_is_run_or_listed_with_a_reason():
    found = blocks()
    # every fence says its language, and only shell, Python and plain text are used
    assert {lang for _, lang, _ in found} <= {"sh", "python", "text"}, found
    firsts = {b[2].splitlines()[0].strip() for b in found}
    assert set(NOT_RUN) <= firsts, f"NOT_RUN names blocks the README no longer has: {set(NOT_RUN) - firsts}"
    assert len(runnable()) == RUN_COUNT


# -- the files a reader brings, invented --------------------------------------------------------
def _basins(path: Path) -> None:
    box = lambda w, s, e, n: [[[w, s], [e, s], [e, n], [w, n], [w, s]]]  # noqa: E731
    feats = [
        {"type": "Feature", "properties": {"code": "NORTH", "name": "Invented north basin"},
         "geometry": {"type": "Polygon", "coordinates": box(0.0, 45.0, 10.0, 51.0)}},
        {"type": "Feature", "properties": {"code": "SOUTH", "name": "Invented south basin"},
         "geometry": {"type": "Polygon", "coordinates": box(-4.0, 39.0, 8.0, 44.0)}},
    ]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))


def _long_record(folder: Path) -> None:
    """era5_2020.nc (1 Oct 2019 to 31 Dec 2020) and era5_2021.nc (to 30 Sep 2021): two water
    years of daily invented level fields on a 2.5° grid around the demo basin, q varying with
    the season."""
    from budget import testing

    days = pd.date_range("2019-10-01", "2021-09-30", freq="D")
    ds = testing.level_dataset(nt=days.size, lon=np.arange(-10.0, 20.01, 2.5), lat=np.arange(35.0, 55.01, 2.5))
    ds = ds.assign_coords(time=days.values)
    season = 1.0 + 0.3 * np.sin(2 * np.pi * (days.day_of_year.values - 100) / 365.25)
    ds["q"] = ds["q"] * season[:, None, None, None]
    ds["q"].attrs = {"units": "kg kg-1", "standard_name": "specific_humidity"}
    ds.attrs["title"] = "invented test record for the README's examples (not real weather)"
    ds.sel(time=slice(None, "2020-12-31")).to_netcdf(folder / "era5_2020.nc")
    ds.sel(time=slice("2021-01-01", None)).to_netcdf(folder / "era5_2021.nc")


def _gauge(path: Path) -> None:
    days = pd.date_range("2019-10-01", "2021-09-30", freq="D")
    flow = 300.0 + 100.0 * np.cos(2 * np.pi * (days.day_of_year.values - 80) / 365.25)
    pd.DataFrame({"time": days.strftime("%Y-%m-%d"), "discharge_m3_s": flow}).to_csv(path, index=False)


def _cli_shim(folder: Path) -> Path:
    """A `fluxfence` on PATH that is this interpreter running this checkout's CLI."""
    bin_dir = folder / "bin"
    bin_dir.mkdir()
    shim = bin_dir / "fluxfence"
    shim.write_text(f"#!/bin/sh\nexec {shlex.quote(sys.executable)} -m app.cli \"$@\"\n")
    shim.chmod(0o755)
    return bin_dir


def _outs(text: str) -> list[str]:
    return re.findall(r"--out\s+(\S+)", text)


def test_readme_blocks_run_as_written(tmp_path):
    work = tmp_path / "reader"
    work.mkdir()
    _basins(work / "basins.geojson")
    _long_record(work)
    _gauge(work / "gauge.csv")
    root = str(README.parent)
    env = dict(os.environ)
    env["PATH"] = f"{_cli_shim(tmp_path)}{os.pathsep}{env.get('PATH', '')}"
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env["MPLBACKEND"] = "Agg"
    ran = 0
    for line, lang, text in runnable():
        if lang == "sh":
            cmd = ["bash", "-e", "-u", "-o", "pipefail", "-c", text]
        else:
            cmd = [sys.executable, "-c", text]
        r = subprocess.run(cmd, cwd=work, env=env, capture_output=True, text=True, timeout=900)
        assert r.returncode == 0, f"README.md line {line} ({lang}) failed:\n{text}\n--- stderr:\n{r.stderr[-3000:]}"
        for out in _outs(text):
            assert (work / out).exists(), f"README.md line {line}: '{out}' was not written"
        ran += 1
    assert ran == RUN_COUNT
    # the Python block wrote its CSV too
    assert (work / "basin_python.csv").exists()
