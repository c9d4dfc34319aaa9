"""Behaviour of the dashboard: regions in, budgets and maps out.

All computation goes through the engine (budget.*); this module only moves data between
the page and the engine and turns every user-facing problem into one visible sentence.
Callbacks are registered at import with ``dash.callback`` (module level, so the background
job can be pickled); ``configure`` (called by server.create_app) sets what they may read.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import json
import logging
import os
import re
import threading
import time
import uuid
from pathlib import Path

import numpy as np
import pandas as pd
from dash import Input, Output, State, callback, ctx, dcc, html, no_update
from dash.exceptions import PreventUpdate

from budget.errors import FluxfenceError

from . import figures

log = logging.getLogger("fluxfence.app")

MAX_REGIONS = 30
MAP_MAX_CELLS = 250_000  # larger grids are thinned for display only

_STATE: dict = {"sources": {}, "cache_dir": None, "assets": None, "upload_limit": 10 * 2**20}
_LOCKS: dict = {}


def _lock() -> threading.Lock:
    """A lock of this process.  The background job runs in a forked child; a lock inherited
    from the parent may have been held by another thread at the fork and never released."""
    pid = os.getpid()
    lock = _LOCKS.get(pid)
    if lock is None:
        lock = _LOCKS.setdefault(pid, threading.Lock())
    return lock


_FIELDS: dict = {}
_SNAPSHOTS: dict = {}
_CACHE: dict = {}
_RANGES: dict = {}


CONFIG_ENV = "FLUXFENCE_DASHBOARD_CONFIG"


def configure(sources, cache_dir, assets, upload_limit) -> None:
    """Called by server.create_app: the field sets, the cache folder, the upload cap.

    The settings are also written to <cache_dir>/dashboard.json, named by an environment
    variable, so that a background worker (a fresh spawned process) reads the same ones.
    """
    _STATE["sources"] = {s["id"]: s for s in sources}
    _STATE["cache_dir"] = str(cache_dir)
    _STATE["assets"] = str(assets)
    _STATE["upload_limit"] = int(upload_limit)
    path = Path(cache_dir) / "dashboard.json"
    path.write_text(json.dumps({"sources": sources, "cache_dir": str(cache_dir),
                                "assets": str(assets), "upload_limit": int(upload_limit)}))
    os.environ[CONFIG_ENV] = str(path)
    _FIELDS.clear()
    _SNAPSHOTS.clear()
    _CACHE.clear()
    _RANGES.clear()


# ---------------------------------------------------------------------------------------------
# server-side state: opened fields, map snapshots, the result cache
# ---------------------------------------------------------------------------------------------
def _ensure_configured() -> None:
    """In a spawned background worker: load the settings the server wrote."""
    if _STATE["cache_dir"] is None and os.environ.get(CONFIG_ENV):
        conf = json.loads(Path(os.environ[CONFIG_ENV]).read_text())
        _STATE["sources"] = {s["id"]: s for s in conf["sources"]}
        _STATE["cache_dir"] = conf["cache_dir"]
        _STATE["assets"] = conf["assets"]
        _STATE["upload_limit"] = conf["upload_limit"]


def _source(source_id):
    _ensure_configured()
    src = _STATE["sources"].get(str(source_id))
    if src is None:
        raise KeyError("unknown field set")
    return src


def _fields(source_id):
    """The opened Fields of a source (opened once per process; lazy, dask-backed)."""
    from budget.fields import open_fields

    key = (os.getpid(), str(source_id))
    with _lock():
        if key not in _FIELDS:
            _FIELDS[key] = open_fields(_source(source_id)["paths"])
        return _FIELDS[key]


def _results():
    import diskcache

    _ensure_configured()
    key = os.getpid()
    if key not in _CACHE:
        _CACHE[key] = diskcache.Cache(str(Path(_STATE["cache_dir"]) / "budgets"),
                                      size_limit=2**31)
    return _CACHE[key]


def _snapshot(source_id, time_index: int):
    from budget.maps import column_snapshot

    key = (os.getpid(), str(source_id), int(time_index))
    with _lock():
        hit = _SNAPSHOTS.get(key)
    if hit is not None:
        return hit
    fields = _fields(source_id)
    snap = column_snapshot(fields, int(time_index))
    ny, nx = snap.sizes["lat"], snap.sizes["lon"]
    if ny * nx > MAP_MAX_CELLS:
        stride = int(np.ceil(np.sqrt(ny * nx / MAP_MAX_CELLS)))
        snap = snap.isel(lat=slice(None, None, stride), lon=slice(None, None, stride))
    with _lock():
        if len(_SNAPSHOTS) > 96:
            _SNAPSHOTS.clear()
        _SNAPSHOTS[key] = snap
    return snap


_COAST: dict = {}


def _coastline():
    if "lines" not in _COAST:
        _COAST["lines"] = figures.load_coastline(
            Path(_STATE["assets"]) / "coastline_110m.geojson")
    return _COAST["lines"]


def _budget_key(source_id, geojson: dict, method: str, correction: str = "default",
                attribution=None) -> str:
    src = _source(source_id)
    stamps = []
    for p in src["paths"]:
        try:
            st = os.stat(p)
            stamps.append([p, st.st_mtime_ns, st.st_size])
        except OSError:
            stamps.append([p, None, None])
    props = geojson.get("properties") or {}
    blob = json.dumps({
        "files": stamps,
        "geometry": geojson.get("geometry"),
        "kind": props.get("region_kind"),
        "great_circle": props.get("great_circle"),
        "bbox": props.get("bbox"),
        "method": method,
        "correction": correction,
        "attribution": attribution,  # layers and AR threshold (app/callbacks_attribution.py)
    }, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:32]


def _message(exc: BaseException, doing: str) -> str:
    """One sentence for the user; a traceback only in the server log."""
    if isinstance(exc, FluxfenceError):
        return str(exc)
    log.exception("unexpected problem while %s", doing)
    return (f"Something unexpected went wrong while {doing} ({type(exc).__name__}); "
            "this is a bug in Fluxfence — the details are in the server log.")


def _iso(t) -> str:
    return pd.Timestamp(t).strftime("%Y-%m-%d %H:%M UTC")


def _slug(name: str) -> str:
    s = re.sub(r"[^A-Za-z0-9]+", "_", name or "region").strip("_").lower()
    return s[:60] or "region"


# ---------------------------------------------------------------------------------------------
# regions: from the map, clicks, uploads and typed boxes into the list
# ---------------------------------------------------------------------------------------------
_PAIR = re.compile(r"(-?\d*\.?\d+(?:[eE][-+]?\d+)?)\s*,\s*(-?\d*\.?\d+(?:[eE][-+]?\d+)?)")


def path_vertices(path: str):
    """Vertices of a Plotly closed-path shape ("M x,y L x,y … Z") in data coordinates."""
    pts = [(float(a), float(b)) for a, b in _PAIR.findall(path or "")]
    if len(pts) > 1 and pts[0] == pts[-1]:
        pts = pts[:-1]
    return [p[0] for p in pts], [p[1] for p in pts]


def _record(region, rid: str, name: str) -> dict:
    region.name = name
    feature = region.to_geojson()
    rings = [[np.round(r.lon, 5).tolist(), np.round(r.lat, 5).tolist()] for r in region.rings]
    return {"id": rid, "name": name, "geojson": feature, "rings": rings,
            "kind": region.kind, "area_km2": region.area_m2() / 1e6,
            "vertices": int(region.vertex_count)}


def _new_id(regions) -> str:
    used = {r["id"] for r in regions}
    n = len(regions) + 1
    while f"r{n}" in used:
        n += 1
    return f"r{n}"


def _decode_upload(contents: str, filename: str) -> bytes:
    from budget.errors import RegionError

    try:
        _, b64 = contents.split(",", 1)
        data = base64.b64decode(b64, validate=True)
    except (ValueError, binascii.Error):
        raise RegionError(f"The upload of '{filename}' arrived damaged; upload the file again.")
    limit = _STATE["upload_limit"]
    if len(data) > limit:
        raise RegionError(
            f"The file '{filename}' is {len(data) / 2**20:.1f} MB, more than the "
            f"{limit / 2**20:g} MB allowed for a region; simplify the outline or zip the "
            "shapefile.")
    return data


def _upload_features(filename: str, data: bytes) -> list[dict]:
    from budget.region import list_features

    # the region package picks the reader by the name and reads a zip in memory, capped
    return list_features(data, filename=filename)


_REGION_OUTPUTS = [  # (keyword used in _pack, component, property)
    ("regions", "regions", "data"), ("options", "region-select", "options"),
    ("selected", "region-select", "value"), ("vertices", "vertices", "data"),
    ("message", "region-message", "children"), ("message_class", "region-message", "className"),
    ("feature_row", "feature-row", "style"), ("feature_options", "feature", "options"),
    ("feature_value", "feature", "value"), ("held", "upload-held", "data"),
    ("name", "region-name", "value"), ("upload_contents", "upload", "contents"),
]


def _pack(**values):
    unknown = set(values) - {k for k, _, _ in _REGION_OUTPUTS}
    if unknown:
        raise TypeError(f"unknown outputs {unknown}")
    return tuple(values.get(k, no_update) for k, _, _ in _REGION_OUTPUTS)


def _options(regions):
    return [{"label": r["name"], "value": r["id"]} for r in regions]


@callback(
    [Output(c, p) for _, c, p in _REGION_OUTPUTS],
    Input("map", "relayoutData"),
    Input("map", "clickData"),
    Input("click-close", "n_clicks"),
    Input("click-undo", "n_clicks"),
    Input("click-clear", "n_clicks"),
    Input("map-tool", "value"),
    Input("upload", "contents"),
    Input("feature-use", "n_clicks"),
    Input("box-add", "n_clicks"),
    Input("region-rename", "n_clicks"),
    Input("region-remove", "n_clicks"),
    Input("region-select", "value"),
    State("regions", "data"),
    State("vertices", "data"),
    State("upload", "filename"),
    State("upload-held", "data"),
    State("feature", "value"),
    State("box-west", "value"),
    State("box-south", "value"),
    State("box-east", "value"),
    State("box-north", "value"),
    State("region-name", "value"),
    prevent_initial_call=True,
)
def edit_regions(relayout, click, _close, _undo, _clear, tool, contents, _use, _box, _rename,
                 _remove, selected, regions, vertices, filename, held, feature, west, south,
                 east, north, typed_name):
    from budget.region import region_from_bbox, region_from_upload, region_from_vertices

    trigger = ctx.triggered_id
    regions = list(regions or [])
    vertices = list(vertices or [])

    def added(region, name):
        if len(regions) >= MAX_REGIONS:
            return _pack(message=f"The list holds {MAX_REGIONS} regions already; "
                         "remove one before adding another.", message_class="notice error")
        rid = _new_id(regions)
        taken = {r["name"] for r in regions}
        k = 1  # default names count regions of their own kind ("Box 1", "Box 2", …), unique
        while name.replace("{n}", str(k)) in taken:
            k += 1
        name = name.replace("{n}", str(k))
        rec = _record(region, rid, name)
        new = regions + [rec]
        return _pack(regions=new, options=_options(new), selected=rid,
                     message=f"Added “{name}”: {rec['area_km2']:,.0f} km².",
                     message_class="notice", name=name)

    def failed(exc, doing):
        return _pack(message=_message(exc, doing), message_class="notice error")

    try:
        if trigger == "map":
            prop = ctx.triggered[0]["prop_id"].split(".")[-1]
            if prop == "clickData":
                if tool != "click" or not click or not click.get("points"):
                    raise PreventUpdate
                pt = click["points"][0]
                vertices.append([float(pt["x"]), float(pt["y"])])
                return _pack(vertices=vertices)
            shapes = (relayout or {}).get("shapes")
            if not shapes:
                raise PreventUpdate
            shape = shapes[-1]
            if shape.get("type") == "rect":
                xs = sorted([float(shape["x0"]), float(shape["x1"])])
                ys = sorted([float(shape["y0"]), float(shape["y1"])])
                region = region_from_bbox(round(xs[0], 2), round(ys[0], 2), round(xs[1], 2),
                                          round(ys[1], 2))
                return added(region, "Box {n}")
            if shape.get("type") == "path":
                lon, lat = path_vertices(shape.get("path", ""))
                region = region_from_vertices(np.round(lon, 3), np.round(lat, 3))
                return added(region, "Shape {n}")
            raise PreventUpdate
        if trigger == "click-undo":
            return _pack(vertices=vertices[:-1])
        if trigger in ("click-clear", "map-tool"):
            return _pack(vertices=[])
        if trigger == "click-close":
            if len(vertices) < 3:
                return _pack(message=f"A region needs at least 3 vertices; "
                             f"{len(vertices)} placed so far — click more points on the map.",
                             message_class="notice error")
            region = region_from_vertices([v[0] for v in vertices], [v[1] for v in vertices])
            out = added(region, "Clicked shape {n}")
            return out[:3] + ([],) + out[4:]
        if trigger == "box-add":
            region = region_from_bbox(west, south, east, north)
            return added(region, "Typed box {n}")
        if trigger == "upload":
            if not contents:
                raise PreventUpdate
            name = Path(filename or "upload").name
            data = _decode_upload(contents, name)
            feats = _upload_features(name, data)
            if len(feats) > 1:
                token = uuid.uuid4().hex
                _results().set(f"upload:{token}", (name, data), expire=3600)
                options = [{"label": f"{f['name']}" + (f" ({f['geometry']})"
                            if f.get("geometry") else ""), "value": f["index"]} for f in feats]
                return _pack(feature_row={"display": "flex"}, feature_options=options,
                             feature_value=feats[0]["index"], held=token,
                             message=f"'{name}' holds {len(feats)} features; pick one "
                             "and press “Use this feature”.", message_class="notice",
                             upload_contents=None)
            region = region_from_upload(name, data)
            out = added(region, region.name or Path(name).stem)
            return out[:11] + (None,)
        if trigger == "feature-use":
            if not held:
                raise PreventUpdate
            stored = _results().get(f"upload:{held}")
            if stored is None:
                return _pack(message="The uploaded file has expired; upload it again.",
                             message_class="notice error")
            name, data = stored
            region = region_from_upload(name, data, feature=int(feature))
            out = list(added(region, region.name or f"{Path(name).stem} {feature}"))
            out[6] = {"display": "none"}
            out[9] = None
            return tuple(out)
        if trigger == "region-rename":
            new_name = (typed_name or "").strip()
            if not selected or not new_name:
                return _pack(message="Choose a region and type a name first.",
                             message_class="notice error")
            for r in regions:
                if r["id"] == selected:
                    r["name"] = new_name
                    r["geojson"].setdefault("properties", {})["name"] = new_name
            return _pack(regions=regions, options=_options(regions),
                         message="", message_class="notice")
        if trigger == "region-remove":
            if not selected:
                raise PreventUpdate
            left = [r for r in regions if r["id"] != selected]
            value = left[-1]["id"] if left else None
            return _pack(regions=left, options=_options(left),
                         selected=value, message="",
                         name=left[-1]["name"] if left else "")
        if trigger == "region-select":
            name = next((r["name"] for r in regions if r["id"] == selected), "")
            return _pack(name=name, message="")
    except PreventUpdate:
        raise
    except Exception as exc:  # noqa: BLE001 - every problem becomes one visible sentence
        doing = {"upload": "reading the uploaded file", "feature-use": "reading the feature",
                 "box-add": "making the box"}.get(trigger, "making the region")
        out = failed(exc, doing)
        if trigger == "upload":
            return out[:11] + (None,)
        return out
    raise PreventUpdate


@callback(
    Output("region-info", "children"),
    Input("regions", "data"),
    Input("region-select", "value"),
)
def region_info(regions, selected):
    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        return "Draw a box or a shape on the map, click vertices, upload a file or type a box."
    kind = "box" if rec.get("kind") == "bbox" else f"{rec.get('vertices', 0)} vertices"
    return f"{rec['area_km2']:,.0f} km² · {kind}"


@callback(
    Output("click-bar", "style"),
    Output("click-count", "children"),
    Input("map-tool", "value"),
    Input("vertices", "data"),
)
def click_bar(tool, vertices):
    if tool != "click":
        return {"display": "none"}, no_update
    n = len(vertices or [])
    text = ("Click on the map to place vertices (they snap to grid-cell centres)."
            if n == 0 else f"{n} vertices placed; close the shape when done.")
    return {"display": "flex"}, text


@callback(
    Output("download-region", "data"),
    Input("dl-region", "n_clicks"),
    State("regions", "data"),
    State("region-select", "value"),
    prevent_initial_call=True,
)
def download_region(_n, regions, selected):
    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        raise PreventUpdate
    collection = {"type": "FeatureCollection", "features": [rec["geojson"]]}
    return dcc.send_string(json.dumps(collection, indent=1), f"{_slug(rec['name'])}.geojson")


# ---------------------------------------------------------------------------------------------
# time: slider, play/pause
# ---------------------------------------------------------------------------------------------
def _marks(times, count=4):
    n = len(times)
    if n == 0:
        return {}
    idx = sorted(set(np.linspace(0, n - 1, min(count, n)).round().astype(int).tolist()))
    return {int(i): pd.Timestamp(times[i]).strftime("%-d %b %Hh") for i in idx}


@callback(
    Output("time", "max"),
    Output("time", "marks"),
    Output("period", "max"),
    Output("period", "marks"),
    Output("period", "value"),
    Output("map-message", "children"),
    Output("map-message", "className"),
    Input("source", "value"),
)
def setup_time(source_id):
    try:
        times = _fields(source_id).ds["time"].values
    except Exception as exc:  # noqa: BLE001
        return 1, {}, 1, {}, [0, 1], _message(exc, "opening the fields"), "notice error"
    n = len(times)
    marks = _marks(times)
    return max(n - 1, 0), marks, max(n - 1, 0), marks, [0, max(n - 1, 0)], "", "notice"


@callback(
    Output("time", "value"),
    Input("player", "n_intervals"),
    Input("source", "value"),
    State("time", "value"),
    State("time", "max"),
    prevent_initial_call=True,
)
def advance_time(_tick, _source, value, vmax):
    if ctx.triggered_id == "source":
        return 0
    vmax = int(vmax or 0)
    return 0 if vmax <= 0 else (int(value or 0) + 1) % (vmax + 1)


@callback(
    Output("player", "disabled"),
    Output("play", "children"),
    Input("play", "n_clicks"),
    State("player", "disabled"),
    prevent_initial_call=True,
)
def play_pause(_n, disabled):
    return (False, "❚❚ Pause") if disabled else (True, "▶ Play")


# ---------------------------------------------------------------------------------------------
# the map
# ---------------------------------------------------------------------------------------------
@callback(
    Output("map", "figure"),
    Output("time-label", "children"),
    Input("source", "value"),
    Input("map-field", "value"),
    Input("time", "value"),
    Input("map-arrows", "value"),
    Input("regions", "data"),
    Input("region-select", "value"),
    Input("vertices", "data"),
    Input("map-tool", "value"),
    Input("region-message", "children"),  # a refused drawing is cleared from the map
)
def draw_map(source_id, field, time_index, arrows, regions, selected, vertices, tool, _msg):
    try:
        fields = _fields(source_id)
        nt = fields.ds.sizes["time"]
        t = min(max(int(time_index or 0), 0), nt - 1)
        snap = _snapshot(source_id, t)
        label = _iso(fields.ds["time"].values[t])
        dragmode = "pan" if tool in ("pan", "click") else tool
        field = field or "ivt"
        # colour limits only widen as more time steps are seen, so the scale holds still;
        # on first sight of a field they come from up to 8 steps spread over the record
        # (when the grid is small enough to integrate that often), so the event's peak
        # does not saturate the scale
        lo, hi = figures.color_limits(figures.field_values(snap, field), field)
        rkey = (os.getpid(), str(source_id), field)
        seen = _RANGES.get(rkey)
        if seen is None and fields.ds["lat"].size * fields.ds["lon"].size * fields.ds.sizes.get("level", 1) <= 2_000_000:
            for k in np.unique(np.linspace(0, nt - 1, min(nt, 8)).round().astype(int)):
                klo, khi = figures.color_limits(figures.field_values(_snapshot(source_id, int(k)), field), field)
                lo, hi = min(lo, klo), max(hi, khi)
        if seen is not None:
            lo, hi = min(lo, seen[0]), max(hi, seen[1])
        _RANGES[rkey] = (lo, hi)
        fig = figures.map_figure(
            snap, field, coastline=_coastline(), color_range=(lo, hi), regions=regions or [],
            active_region=selected, vertices=vertices or [], time_label=label,
            arrows=bool(arrows), dragmode=dragmode, uirevision=str(source_id),
        )
        return fig, f"{label}  ·  step {t + 1} of {nt}"
    except Exception as exc:  # noqa: BLE001
        return figures.empty_figure(_message(exc, "drawing the map")), ""


# ---------------------------------------------------------------------------------------------
# the budget: request → (cache or background job) → figures
# ---------------------------------------------------------------------------------------------
@callback(
    Output("want", "data"),
    Output("job", "data"),
    Input("region-select", "value"),
    Input("method", "value"),
    Input("source", "value"),
    Input("regions", "data"),
    Input("correction", "value"),
    Input("budget-watch", "n_intervals"),
    Input("insight-options", "data"),
    State("want", "data"),
)
def request_budget(selected, method, source_id, regions, correction, _tick, attribution, current):
    cache = _results()
    if ctx.triggered_id == "budget-watch":
        # the watchdog: a job that never started or died without a word is submitted again
        if not current or current["key"] in cache or f"error:{current['key']}" in cache:
            raise PreventUpdate
        beat = cache.get(f"alive:{current['key']}")
        now = time.time()
        if (beat is not None and now - beat < 10) or now - current.get("submitted", 0) < 8:
            raise PreventUpdate
        attempt = int(current.get("attempt", 0)) + 1
        if attempt > 2:
            cache.set(f"error:{current['key']}", "The background worker did not start or "
                      "stopped without a word; see the server log, then choose the region "
                      "again.", expire=600)
            raise PreventUpdate
        log.info("budget job for %s did not report; submitting it again", current["name"])
        again = dict(current, submitted=now, attempt=attempt)
        return again, again
    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        return None, no_update
    try:
        key = _budget_key(source_id, rec["geojson"], method, correction, attribution)
    except KeyError:
        return None, no_update
    want = {"key": key, "source": str(source_id), "method": method, "geojson": rec["geojson"],
            "name": rec["name"], "correction": correction, "submitted": time.time(),
            "attribution": attribution}
    if key in cache:
        return want, no_update
    cache.delete(f"error:{key}")
    return want, want


@callback(
    Output("done", "data"),
    Input("job", "data"),
    background=True,
    progress=[Output("budget-progress", "value"), Output("budget-progress", "max")],
    progress_default=[None, None],  # no value: the bar moves to and fro until the first step
    running=[(Output("budget-running", "style"), {"display": "flex"}, {"display": "none"})],
    cancel=[Input("budget-cancel", "n_clicks")],
    interval=500,
    prevent_initial_call=True,
)
def run_budget(set_progress, job):
    """The background job: compute the budget of a region with the engine and cache it."""
    from budget.attribution import AR_IVT_THRESHOLD
    from budget.ledger import compute
    from budget.options import RunOptions
    from budget.region import region_from_geojson

    from .callbacks_attribution import budget_options, read_options

    if not job:
        raise PreventUpdate
    try:  # the key is derived here again: the page's copy is never trusted
        correction = job.get("correction", "default")
        if correction not in ("default", "off"):
            raise PreventUpdate
        attribution = read_options((job.get("attribution") or {}).get("layers"),
                                   (job.get("attribution") or {}).get("ar", AR_IVT_THRESHOLD))
        key = _budget_key(job["source"], job["geojson"], job["method"], correction,
                          job.get("attribution"))
    except (KeyError, TypeError, AttributeError, FluxfenceError):
        raise PreventUpdate
    if key != job.get("key"):
        raise PreventUpdate
    cache = _results()
    if key in cache:
        return {"key": key, "error": None}
    stop = threading.Event()

    def heartbeat():  # tells the page's watchdog that this job is alive
        while not stop.is_set():
            cache.set(f"alive:{key}", time.time(), expire=60)
            stop.wait(2.0)

    threading.Thread(target=heartbeat, daemon=True).start()
    try:
        fields = _fields(job["source"])
        region = region_from_geojson(job["geojson"], name=job.get("name"))
        ds = compute(fields, region,
                     options=budget_options(job["method"], correction, attribution, fields.kind),
                     run=RunOptions(progress=lambda done, total: set_progress((str(done), str(total)))))
        ds = ds.load()
        cache.set(key, ds)
        return {"key": key, "error": None}
    except Exception as exc:  # noqa: BLE001
        message = _message(exc, "computing the budget")
        cache.set(f"error:{key}", message, expire=3600)
        return {"key": key, "error": message}
    finally:
        stop.set()


def _table(rows, edges=()):
    head = html.Thead(html.Tr([html.Th("over the period"), html.Th("mean"), html.Th("total")]))
    body = html.Tbody([
        html.Tr([html.Td(r["term"]), html.Td(r["mean"], className="num"),
                 html.Td(r["total"], className="num")]) for r in rows
    ])
    out = [html.Table([head, body], className="totals")]
    if edges:
        ehead = html.Thead(html.Tr([html.Th("through each edge"), html.Th("mean import"),
                                    html.Th("")]))
        ebody = html.Tbody([
            html.Tr([html.Td(e["edge"]), html.Td(e["mean"], className="num"),
                     html.Td("coming in" if e["direction"] == "in" else "going out",
                             className=f"dir {e['direction']}")]) for e in edges
        ])
        out.append(html.Table([ehead, ebody], className="totals edges"))
    return html.Div(out)


@callback(
    Output("series", "figure"),
    Output("profile", "figure"),
    Output("curtain", "figure"),
    Output("budget-table", "children"),
    Output("budget-message", "children"),
    Output("budget-message", "className"),
    Output("period-label", "children"),
    Output("budget-watch", "disabled"),
    Input("want", "data"),
    Input("done", "data"),
    Input("units", "value"),
    Input("time", "value"),
    Input("period", "value"),
    Input("budget-watch", "n_intervals"),
)
def show_budget(want, done, units, time_index, period, _tick):
    return _show_budget(want, done, units, time_index, period)


def _show_budget(want, done, units, time_index, period):
    if not want:
        blank = figures.empty_figure("Draw a region on the map to see its budget.")
        return blank, blank, blank, None, "", "notice", "", True
    cache = _results()
    ds = cache.get(want["key"])
    if ds is None:
        error = cache.get(f"error:{want['key']}")
        if error is None and done and done.get("key") == want["key"]:
            error = done.get("error")
        if error:
            blank = figures.empty_figure("No budget for this region.")
            return blank, blank, blank, None, error, "notice error", "", True
        if ctx.triggered_id == "budget-watch":
            raise PreventUpdate  # still waiting; nothing new to draw
        waiting = figures.empty_figure("Computing the budget…")
        return waiting, waiting, waiting, no_update, "", "notice", "", False
    try:
        nt = ds.sizes["time"]
        t = min(max(int(time_index or 0), 0), nt - 1)
        lo, hi = (period or [0, nt - 1])[:2]
        lo, hi = int(lo), int(min(hi, nt - 1))
        times = ds["time"].values
        series = figures.series_figure(ds, units, time_index=t, name=want.get("name"))
        profile = figures.profile_figure(ds, t)
        curtain = figures.curtain_figure(ds, t)
        table = _table(figures.period_rows(ds, units, lo, hi), figures.edge_rows(ds, units, lo, hi))
        label = f"{_iso(times[lo])} → {_iso(times[hi])}"
        note = ""
        warnings = json.loads(ds.attrs.get("warnings", "[]") or "[]")
        if warnings:
            note = "Note: " + " ".join(warnings)
        return series, profile, curtain, table, note, "notice", label, True
    except Exception as exc:  # noqa: BLE001
        blank = figures.empty_figure("No budget to show.")
        return (blank, blank, blank, None, _message(exc, "drawing the budget"), "notice error",
                "", True)


def finished_budget(want):
    """The cached budget of the page's request ``want``, or None (still computing, failed)."""
    if not want or not want.get("key"):
        return None
    return _results().get(want["key"])


def opened_fields(source_id):
    """The opened Fields of a field set this server offers (shared with the budget jobs)."""
    return _fields(source_id)


@callback(
    Output("download-csv", "data"),
    Input("dl-csv", "n_clicks"),
    State("want", "data"),
    prevent_initial_call=True,
)
def download_csv(_n, want):
    from budget.export import to_csv_text

    return _download(want, lambda ds: dcc.send_string(to_csv_text(ds), _download_name(want, "csv")))


def _download_name(want, ext):
    return f"{_slug(want['name'])}_{want['method']}.{ext}"


def _download(want, send):
    """The cached budget of the selected region handed to ``send``; nothing while computing."""
    ds = _results().get(want["key"]) if want else None
    if ds is None:
        raise PreventUpdate
    return send(ds)


@callback(
    Output("download-nc", "data"),
    Input("dl-nc", "n_clicks"),
    State("want", "data"),
    prevent_initial_call=True,
)
def download_netcdf(_n, want):
    from budget.export import to_netcdf_bytes

    return _download(want, lambda ds: dcc.send_bytes(to_netcdf_bytes(ds), _download_name(want, "nc")))


@callback(
    Output("budget-watch", "n_intervals"),
    Input("budget-cancel", "n_clicks"),
    State("want", "data"),
    State("budget-watch", "n_intervals"),
    prevent_initial_call=True,
)
def cancel_budget(_n, want, ticks):
    """Cancel (the job itself is stopped by Dash): say so, and keep the watchdog quiet."""
    if not want:
        raise PreventUpdate
    _results().set(f"error:{want['key']}", "The computation was cancelled; choose the region "
                   "(or the method) again to start it anew.", expire=3600)
    return (ticks or 0) + 1
