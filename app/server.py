"""The Dash app factory and the server entry point.

    create_app(paths=None, data_dir=None, cache_dir=None) -> dash.Dash
    serve(paths=None, data_dir=None, host="127.0.0.1", port=8050)

The server reads only the field files given here or found under ``data_dir``: a request names
a field set by its index in that list, never by a path.  With neither, it opens the bundled
invented sample event.  Debug is off, the bind address defaults to 127.0.0.1, uploads are
capped (UPLOAD_LIMIT_BYTES) and no user input is evaluated.

Pages are served by waitress (``workers`` threads); budgets are computed in a small pool of
threads of the same process on fields opened once (app.state, app.jobs).  Each data file is
resolved again whenever it is opened and must still lie inside the data folder.
"""

from __future__ import annotations

import logging
import tempfile
from pathlib import Path

import dash

from budget.errors import RequestError
from budget.fields.opening import FIELD_SUFFIXES  # the format table's own endings (NetCDF, Zarr, GRIB)

ASSETS = Path(__file__).resolve().parent.parent / "assets"
UPLOAD_LIMIT_BYTES = 10 * 2**20  # a region file; anything larger gets a clear message
REQUEST_LIMIT_BYTES = 64 * 2**20  # hard cap on any request body

log = logging.getLogger("fluxfence.app")


def _inside(path: Path, root: Path) -> bool:
    try:
        path.resolve().relative_to(root.resolve())
        return True
    except ValueError:
        return False


def resolve_sources(paths=None, data_dir=None) -> list[dict]:
    """The field sets this server may read: [{"id", "label", "paths"}]."""
    sources: list[dict] = []
    if paths:
        files = []
        for p in paths:
            pth = Path(p).expanduser()
            if not pth.exists():
                raise RequestError(f"The fields file {str(p)!r} does not exist; check the path.")
            files.append(str(pth.resolve()))
        label = Path(files[0]).name + (f" + {len(files) - 1} more" if len(files) > 1 else "")
        sources.append({"id": "0", "label": label, "paths": files})
    if data_dir:
        root = Path(data_dir).expanduser()
        if not root.is_dir():
            raise RequestError(f"The data folder {str(data_dir)!r} does not exist; "
                               "give an existing folder to --data-dir.")
        found = []
        for candidate in sorted(root.rglob("*")):
            if candidate.suffix.lower() not in FIELD_SUFFIXES:
                continue
            if any(part.endswith(".zarr") for part in candidate.relative_to(root).parts[:-1]):
                continue  # inside a Zarr store
            if not _inside(candidate, root):
                continue  # a link pointing outside the folder
            found.append(candidate)
        for f in found:
            sources.append({"id": str(len(sources)), "label": str(f.relative_to(root)),
                            "paths": [str(f.resolve())], "root": str(root.resolve())})
        if not found and not sources:
            raise RequestError(f"No NetCDF (.nc), Zarr (.zarr) or GRIB (.grib2, .grb) fields under {str(root)!r}; "
                               "put the files there or name them on the command line.")
    if not sources:
        from sample_fields import ensure_sample

        sample = ensure_sample()
        sources = [
            {"id": "0", "label": "Invented demo event — on pressure levels",
             "paths": [str(sample.levels)], "basin": str(sample.basin)},
            {"id": "1", "label": "Invented demo event — column totals",
             "paths": [str(sample.column)], "basin": str(sample.basin)},
        ]
    return sources


def _initial_regions(sources) -> list:
    """The sample event opens with its invented basin selected, so the first screen has a budget."""
    from budget.region import load_region

    from .regions import record

    basin = sources[0].get("basin") if sources else None
    if not basin:
        return []
    region = load_region(path=basin)
    return [record(region, "r1", "Sample basin (invented)")]


def create_app(paths=None, data_dir=None, cache_dir=None, job_threads: int = 2,
               pool_workers: int = 1, long_steps: int = 2000) -> dash.Dash:
    """Build the dashboard for the given fields (the sample event when none are given).

    ``job_threads``: how many budgets are computed at once in threads of this process;
    records longer than ``long_steps`` time steps go to ``pool_workers`` persistent worker
    processes instead (app.pool).
    """
    from . import callbacks, callbacks_attribution, callbacks_datasets, callbacks_records, callbacks_report, regions  # noqa: F401 - registers the callbacks
    from .layout import build_layout
    from .state import Settings, Source, configure

    sources = resolve_sources(paths, data_dir)
    if cache_dir is None:
        cache_dir = tempfile.mkdtemp(prefix="fluxfence-cache-")
    cache_dir = Path(cache_dir)
    cache_dir.mkdir(parents=True, exist_ok=True)
    configure(Settings(
        sources=tuple(Source(id=s["id"], label=s["label"], paths=tuple(s["paths"]),
                             root=s.get("root"), basin=s.get("basin")) for s in sources),
        cache_dir=cache_dir, assets=ASSETS, upload_limit=UPLOAD_LIMIT_BYTES,
        job_threads=job_threads, pool_workers=pool_workers, long_steps=long_steps,
    ))

    app = dash.Dash(
        __name__,
        assets_folder=str(ASSETS),
        assets_ignore=r".*\.py$",
        serve_locally=True,
        title="Fluxfence",
        update_title=None,
        suppress_callback_exceptions=False,
    )
    app.server.config["MAX_CONTENT_LENGTH"] = REQUEST_LIMIT_BYTES
    app.layout = build_layout(
        [{"value": s["id"], "label": s["label"]} for s in sources],
        upload_limit_mb=UPLOAD_LIMIT_BYTES / 2**20,
        initial_regions=_initial_regions(sources),
    )
    return app


def serve(paths=None, data_dir=None, host="127.0.0.1", port=8050, workers: int = 8,
          job_threads: int = 2, pool_workers: int = 1) -> None:
    """Serve the dashboard through waitress (``workers`` request threads) and block.

    Debug is off; the bind address defaults to this machine only.
    """
    import waitress

    logging.basicConfig(level=logging.INFO, format="%(message)s")
    if min(int(workers), int(job_threads), int(pool_workers)) < 1:
        raise RequestError("--workers, --job-threads and --pool-workers take a whole number "
                           "of at least 1.")
    app = create_app(paths=paths, data_dir=data_dir, job_threads=job_threads,
                     pool_workers=pool_workers)
    from .state import current

    current().warm()  # open the first field set now, not when the first page asks
    if host not in ("127.0.0.1", "localhost", "::1"):
        print("note: serving beyond this machine; anyone who can reach it can use it.")
    print(f"Fluxfence dashboard on http://{host}:{port} ({workers} request threads, "
          f"{job_threads} budget threads); Ctrl-C stops it.")
    waitress.serve(app.server, host=host, port=int(port), threads=int(workers),
                   ident="fluxfence", max_request_body_size=REQUEST_LIMIT_BYTES)
