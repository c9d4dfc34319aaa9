"""What the dashboard server holds: its settings, opened fields, caches and running jobs.

One ``AppState`` per server, made by ``configure`` (server.create_app) and reached through
``current()``.  Everything here is shared by the server's threads and guarded by locks:

* ``fields(source_id)``: each field set is opened once and shared by every request;
* ``snapshot(source_id, t)``: map fields at one time (a small LRU cache);
* ``results``: finished budgets keyed by ``budget_key`` (the single cache key: engine version,
  input files with their sizes and times, region geometry, method, correction);
* ``jobs``: the budget jobs (app.jobs.JobRunner), computed in threads of this process.

Paths are never taken from the page: a request names a field set by its id, and each file is
resolved again when it is opened, and must still lie inside the data root (a file swapped for
a symbolic link after the server started is refused).
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from budget import __version__ as ENGINE_VERSION
from budget.errors import RequestError

from .jobs import JobRunner

MAP_MAX_CELLS = 250_000  # larger grids are thinned for display only
CORRECTIONS = ("default", "off")
METHODS = ("boundary", "area")


@dataclass(frozen=True)
class Source:
    """A field set the server may read: the page sees its id and label, never its paths."""

    id: str
    label: str
    paths: tuple[str, ...]
    root: str | None = None  # the folder every path must stay inside (--data-dir)
    basin: str | None = None  # the sample's invented basin outline


@dataclass(frozen=True)
class Settings:
    sources: tuple[Source, ...]
    cache_dir: Path
    assets: Path
    upload_limit: int = 10 * 2**20
    job_threads: int = 2
    pool_workers: int = 1  # persistent worker processes for long records
    long_steps: int = 2000  # a record with more time steps than this goes to the pool


class LRU:
    """A small thread-safe least-recently-used mapping."""

    def __init__(self, size: int):
        self.size = int(size)
        self._data: OrderedDict = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key, default=None):
        with self._lock:
            if key not in self._data:
                return default
            self._data.move_to_end(key)
            return self._data[key]

    def put(self, key, value) -> None:
        with self._lock:
            self._data[key] = value
            self._data.move_to_end(key)
            while len(self._data) > self.size:
                self._data.popitem(last=False)

    def pop(self, key) -> None:
        with self._lock:
            self._data.pop(key, None)

    def __contains__(self, key) -> bool:
        with self._lock:
            return key in self._data

    def __len__(self) -> int:
        with self._lock:
            return len(self._data)


@dataclass
class AppState:
    settings: Settings
    results: LRU = field(default_factory=lambda: LRU(64))
    snapshots: LRU = field(default_factory=lambda: LRU(96))
    held_uploads: LRU = field(default_factory=lambda: LRU(16))
    color_ranges: dict = field(default_factory=dict)
    jobs: JobRunner | None = None

    def __post_init__(self):
        self._opened: dict = {}
        self._open_locks: dict = {}
        self._lock = threading.Lock()
        self._coast = None
        self._pool = None
        if self.jobs is None:
            self.jobs = JobRunner(self.settings.job_threads)

    # -- field sets ---------------------------------------------------------------------------
    def source(self, source_id) -> Source:
        for s in self.settings.sources:
            if s.id == str(source_id):
                return s
        raise RequestError("The page asked for a field set this server does not offer; "
                           "reload the page and choose one from the list.")

    def checked_paths(self, source_id) -> list[str]:
        """The source's files, resolved now; each must still be inside the data root."""
        src = self.source(source_id)
        out = []
        for p in src.paths:
            try:
                real = Path(p).resolve(strict=True)
            except OSError:
                raise RequestError(f"The fields file {Path(p).name!r} is no longer there; "
                                   "restore it or restart the server.") from None
            allowed = (Path(src.root).resolve() if src.root else None)
            if allowed is not None:
                inside = real == allowed or allowed in real.parents
            else:
                inside = str(real) == str(Path(p))
            if not inside:
                raise RequestError(f"The fields file {Path(p).name!r} now leads outside the "
                                   "data folder (it was replaced by a link); it will not be "
                                   "read — put the real file back or restart the server.")
            out.append(str(real))
        return out

    def fields(self, source_id):
        """The opened Fields of a source: opened once, shared by all requests."""
        from budget.fields import open_fields

        sid = str(self.source(source_id).id)
        paths = self.checked_paths(sid)
        with self._lock:
            lock = self._open_locks.setdefault(sid, threading.Lock())
        with lock:
            hit = self._opened.get(sid)
            if hit is None or hit[0] != paths:
                with _OPENING:
                    hit = (paths, open_fields(paths))
                self._opened[sid] = hit
            return hit[1]

    def warm(self) -> threading.Thread:
        """Open the first field set in the background, so the first page does not wait."""
        def opener():
            try:
                self.fields(self.settings.sources[0].id)
            except Exception:  # noqa: BLE001 - the page shows the same problem in a sentence
                pass

        thread = threading.Thread(target=opener, name="fluxfence-warm", daemon=True)
        thread.start()
        return thread

    def pool(self):
        """The pool of persistent workers for long records, started on first use."""
        from .pool import ProcessPool

        with self._lock:
            if self._pool is None:
                self._pool = ProcessPool(self.settings.pool_workers)
            return self._pool

    def shutdown(self) -> None:
        self.jobs.shutdown()
        if self._pool is not None:
            self._pool.shutdown()

    def snapshot(self, source_id, time_index: int):
        from budget.maps import display_snapshot

        key = (str(source_id), int(time_index))
        hit = self.snapshots.get(key)
        if hit is not None:
            return hit
        # rotated and projected grids are drawn on a longitude-latitude view (display only)
        snap = display_snapshot(self.fields(source_id), int(time_index))
        ny, nx = snap.sizes["lat"], snap.sizes["lon"]
        if ny * nx > MAP_MAX_CELLS:
            stride = int(np.ceil(np.sqrt(ny * nx / MAP_MAX_CELLS)))
            snap = snap.isel(lat=slice(None, None, stride), lon=slice(None, None, stride))
        self.snapshots.put(key, snap)
        return snap

    def coastline(self):
        from .figures import load_coastline

        if self._coast is None:
            self._coast = load_coastline(Path(self.settings.assets) / "coastline_110m.geojson")
        return self._coast

    # -- the cache key ------------------------------------------------------------------------
    def budget_key(self, source_id, geojson: dict, method: str, correction: str,
                   attribution=None) -> str:
        """The one key of a budget result: engine version, input files (path, size, mtime),
        region geometry, method, mass-correction setting and the attribution record (layer
        bounds, AR threshold: app/callbacks_attribution.py)."""
        if method not in METHODS or correction not in CORRECTIONS:
            raise RequestError("The page asked for an unknown method or correction setting; "
                               "reload the page.")
        stamps = []
        for p in self.checked_paths(source_id):
            st = os.stat(p)
            stamps.append([p, st.st_mtime_ns, st.st_size])
        props = (geojson or {}).get("properties") or {}
        blob = json.dumps({
            "engine": ENGINE_VERSION,
            "files": stamps,
            "geometry": (geojson or {}).get("geometry"),
            "kind": props.get("region_kind"),
            "great_circle": props.get("great_circle"),
            "bbox": props.get("bbox"),
            "method": method,
            "correction": correction,
            "attribution": attribution,
        }, sort_keys=True, default=str)
        return hashlib.sha256(blob.encode()).hexdigest()[:32]


#: one file opening at a time in this process: the HDF5 library under NetCDF-4 is not safe
#: for concurrent opens from several threads (reads go through xarray's own lock)
_OPENING = threading.Lock()

_CURRENT: list = []  # the one AppState of this server (a list so tests can reconfigure)


def configure(settings: Settings) -> AppState:
    """Make the server's state (called by server.create_app); a previous one is shut down."""
    state = AppState(settings)
    if _CURRENT:
        _CURRENT[0].shutdown()
        _CURRENT[0] = state
    else:
        _CURRENT.append(state)
    return state


def current() -> AppState:
    if not _CURRENT:
        raise RuntimeError("the dashboard is not configured; build it with app.server.create_app")
    return _CURRENT[0]
