"""The Dash app factory and the server entry point.

    create_app(paths=None, data_dir=None, cache_dir=None) -> dash.Dash
    serve(paths=None, data_dir=None, host="127.0.0.1", port=8050)

The server reads only the field files given here or found under ``data_dir``: a request names
a field set by its index in that list, never by a path.  With neither, it opens the bundled
invented sample event.  Debug is off, the bind address defaults to 127.0.0.1, uploads are
capped (UPLOAD_LIMIT_BYTES) and no user input is evaluated.

Budget jobs run in spawned worker processes, which import the main module again: a script
of your own that calls ``serve`` or ``create_app(...).run`` must do so under
``if __name__ == "__main__":`` (as ``fluxfence serve`` does).
"""

from __future__ import annotations

import logging
import os
import tempfile
from pathlib import Path

import dash

from budget.errors import RequestError

ASSETS = Path(__file__).resolve().parent.parent / "assets"
FIELD_SUFFIXES = (".nc", ".nc4", ".netcdf", ".zarr")
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
                            "paths": [str(f.resolve())]})
        if not found and not sources:
            raise RequestError(f"No NetCDF (.nc) or Zarr (.zarr) fields under {str(root)!r}; "
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


def _spawning_manager(cache):
    """A DiskcacheManager whose jobs start in a fresh *spawned* process.

    The default forks the threaded web server; a fork taken while another thread holds a
    lock (SQLite's, HDF5's, a logging handler's) leaves the child waiting on it for ever.
    A spawned worker starts clean and reads the settings through callbacks.configure.
    """
    from dash import DiskcacheManager

    class SpawningDiskcacheManager(DiskcacheManager):
        def call_job_fn(self, key, job_fn, args, context):
            from multiprocess import get_context

            process = get_context("spawn").Process(
                target=job_fn, args=(key, self._make_progress_key(key), args, context),
                daemon=True,
            )
            process.start()
            return process.pid

    return SpawningDiskcacheManager(cache)


def _initial_regions(sources) -> list:
    """The sample event opens with its invented basin selected, so the first screen has a budget."""
    from budget.region import load_region

    from .callbacks import _record

    basin = sources[0].get("basin") if sources else None
    if not basin:
        return []
    region = load_region(path=basin)
    return [_record(region, "r1", "Sample basin (invented)")]


def create_app(paths=None, data_dir=None, cache_dir=None) -> dash.Dash:
    """Build the dashboard for the given fields (the sample event when none are given)."""
    import diskcache

    from . import callbacks, callbacks_attribution  # noqa: F401  (registers the callbacks)
    from .layout import build_layout

    sources = resolve_sources(paths, data_dir)
    if cache_dir is None:
        cache_dir = tempfile.mkdtemp(prefix="fluxfence-cache-")
    cache_dir = Path(cache_dir)
    cache_dir.mkdir(parents=True, exist_ok=True)
    manager = _spawning_manager(diskcache.Cache(str(cache_dir / "jobs")))
    callbacks.configure(sources=sources, cache_dir=cache_dir, assets=ASSETS,
                        upload_limit=UPLOAD_LIMIT_BYTES)

    app = dash.Dash(
        __name__,
        assets_folder=str(ASSETS),
        assets_ignore=r".*\.py$",
        serve_locally=True,
        title="Fluxfence",
        update_title=None,
        background_callback_manager=manager,
        suppress_callback_exceptions=False,
    )
    app.server.config["MAX_CONTENT_LENGTH"] = REQUEST_LIMIT_BYTES
    app.layout = build_layout(
        [{"value": s["id"], "label": s["label"]} for s in sources],
        upload_limit_mb=UPLOAD_LIMIT_BYTES / 2**20,
        initial_regions=_initial_regions(sources),
    )
    return app


def serve(paths=None, data_dir=None, host="127.0.0.1", port=8050) -> None:
    """Start the dashboard and block; debug stays off."""
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    app = create_app(paths=paths, data_dir=data_dir)
    if host not in ("127.0.0.1", "localhost", "::1"):
        print("note: serving beyond this machine; anyone who can reach it can use it.")
    app.run(host=host, port=port, debug=False, dev_tools_hot_reload=False)
