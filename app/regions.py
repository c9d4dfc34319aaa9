"""Region editing in the dashboard: one callback per trigger, with named outputs.

Regions come from the map (a drawn box or shape, clicked vertices), an upload (GeoJSON or a
zipped shapefile, with a feature picker) or a typed box; they are kept in the ``regions``
store as records (``record``).  Every problem becomes one visible sentence in the region
message area, which only ever speaks about the region just chosen or edited.
"""

from __future__ import annotations

import base64
import binascii
import re
import time
import uuid
from pathlib import Path

import numpy as np
from dash import Input, Output, State, callback, dcc, no_update
from dash.exceptions import PreventUpdate

from budget.errors import RegionError

from .messages import problem, slug
from .state import current

MAX_REGIONS = 30


def _out(component, prop):
    return Output(component, prop, allow_duplicate=True)


#: the outputs of adding a region, by name
ADDED = {
    "regions": _out("regions", "data"),
    "options": _out("region-select", "options"),
    "selected": _out("region-select", "value"),
    "message": _out("region-message", "children"),
    "message_class": _out("region-message", "className"),
    "name": _out("region-name", "value"),
}


def named(outputs: dict, **values) -> dict:
    """A callback answer for ``outputs``: the values given, no_update for the rest."""
    unknown = set(values) - set(outputs)
    if unknown:
        raise TypeError(f"unknown outputs {sorted(unknown)}")
    return {k: values.get(k, no_update) for k in outputs}


# ---------------------------------------------------------------------------------------------
# records
# ---------------------------------------------------------------------------------------------
_PAIR = re.compile(r"(-?\d*\.?\d+(?:[eE][-+]?\d+)?)\s*,\s*(-?\d*\.?\d+(?:[eE][-+]?\d+)?)")


def path_vertices(path: str):
    """Vertices of a Plotly closed-path shape ("M x,y L x,y … Z") in data coordinates."""
    pts = [(float(a), float(b)) for a, b in _PAIR.findall(path or "")]
    if len(pts) > 1 and pts[0] == pts[-1]:
        pts = pts[:-1]
    return [p[0] for p in pts], [p[1] for p in pts]


def record(region, rid: str, name: str) -> dict:
    """The page's record of a region: id, name, GeoJSON, rings for drawing, area."""
    region.name = name
    feature = region.to_geojson()
    rings = [[np.round(r.lon, 5).tolist(), np.round(r.lat, 5).tolist()] for r in region.rings]
    edge_names = [list(map(str, r.edge_names)) for r in region.rings]
    return {"id": rid, "name": name, "geojson": feature, "rings": rings, "edge_names": edge_names,
            "kind": region.kind, "area_km2": region.area_m2() / 1e6,
            "vertices": int(region.vertex_count)}


def options(regions) -> list[dict]:
    return [{"label": r["name"], "value": r["id"]} for r in regions]


def _new_id(regions) -> str:
    used = {r["id"] for r in regions}
    n = len(regions) + 1
    while f"r{n}" in used:
        n += 1
    return f"r{n}"


def added(regions, region, name: str, **more) -> dict:
    """The answer that appends ``region`` to the list and selects it."""
    regions = list(regions or [])
    outputs = {**ADDED, **{k: None for k in more}}
    if len(regions) >= MAX_REGIONS:
        return named(outputs, message=f"The list holds {MAX_REGIONS} regions already; "
                     "remove one before adding another.", message_class="notice error")
    rid = _new_id(regions)
    taken = {r["name"] for r in regions}
    k = 1  # default names count regions of their own kind ("Box 1", "Box 2", …), unique
    while name.replace("{n}", str(k)) in taken:
        k += 1
    name = name.replace("{n}", str(k))
    rec = record(region, rid, name)
    new = regions + [rec]
    answer = named(ADDED, regions=new, options=options(new), selected=rid,
                   message=f"Added “{name}”: {rec['area_km2']:,.0f} km².",
                   message_class="notice", name=name)
    answer.update(more)
    return answer


def failed(outputs: dict, exc: BaseException, doing: str, **more) -> dict:
    answer = named(outputs, message=problem(exc, doing), message_class="notice error")
    answer.update(more)
    return answer


# ---------------------------------------------------------------------------------------------
# uploads
# ---------------------------------------------------------------------------------------------
def decode_upload(contents: str, filename: str) -> bytes:
    try:
        _, b64 = contents.split(",", 1)
        data = base64.b64decode(b64, validate=True)
    except (ValueError, binascii.Error):
        raise RegionError(f"The upload of '{filename}' arrived damaged; upload the file again.")
    limit = current().settings.upload_limit
    if len(data) > limit:
        raise RegionError(
            f"The file '{filename}' is {len(data) / 2**20:.1f} MB, more than the "
            f"{limit / 2**20:g} MB allowed for a region; simplify the outline or zip the "
            "shapefile.")
    return data


def upload_features(filename: str, data: bytes) -> list[dict]:
    """The features of an uploaded file; the region package picks the reader by the name and
    reads a zip in memory, capped on its expanded size (budget.region.archive)."""
    from budget.region import list_features

    return list_features(data, filename=filename)


# ---------------------------------------------------------------------------------------------
# callbacks, one per trigger
# ---------------------------------------------------------------------------------------------
#: a drawing on the map: the region outputs, and a stamp when the drawing was refused (the map
#: listens to it to wipe the drawn shape off; it does not listen to the region message, which
#: every region change rewrites, so one region change draws the map once)
DRAWN = {**ADDED, "refused": _out("map-refused", "data")}


def _stamp_refusal(answer: dict) -> dict:
    answer = dict(answer)
    answer["refused"] = time.time() if answer.get("regions", no_update) is no_update else no_update
    return answer


@callback(output=DRAWN, inputs=dict(relayout=Input("map", "relayoutData")),
          state=dict(regions=State("regions", "data")), prevent_initial_call=True)
def drawn_on_map(relayout, regions):
    """A box or a closed shape drawn on the map becomes a region."""
    return _stamp_refusal(_drawn_region(relayout, regions))


def _drawn_region(relayout, regions):
    from budget.region import region_from_bbox, region_from_vertices

    shapes = (relayout or {}).get("shapes")
    if not shapes:
        raise PreventUpdate
    shape = shapes[-1]
    try:
        if shape.get("type") == "rect":
            xs = sorted([float(shape["x0"]), float(shape["x1"])])
            ys = sorted([float(shape["y0"]), float(shape["y1"])])
            region = region_from_bbox(round(xs[0], 2), round(ys[0], 2), round(xs[1], 2),
                                      round(ys[1], 2))
            return added(regions, region, "Box {n}")
        if shape.get("type") == "path":
            lon, lat = path_vertices(shape.get("path", ""))
            region = region_from_vertices(np.round(lon, 3), np.round(lat, 3))
            return added(regions, region, "Shape {n}")
    except Exception as exc:  # noqa: BLE001 - every problem becomes one visible sentence
        return failed(ADDED, exc, "making the region")
    raise PreventUpdate


VERTICES = {"vertices": _out("vertices", "data")}


@callback(output=VERTICES, inputs=dict(click=Input("map", "clickData")),
          state=dict(tool=State("map-tool", "value"), vertices=State("vertices", "data")),
          prevent_initial_call=True)
def vertex_clicked(click, tool, vertices):
    if tool != "click" or not click or not click.get("points"):
        raise PreventUpdate
    pt = click["points"][0]
    return {"vertices": list(vertices or []) + [[float(pt["x"]), float(pt["y"])]]}


@callback(output=VERTICES, inputs=dict(_n=Input("click-undo", "n_clicks")),
          state=dict(vertices=State("vertices", "data")), prevent_initial_call=True)
def vertex_undone(_n, vertices):
    return {"vertices": list(vertices or [])[:-1]}


@callback(output=VERTICES, inputs=dict(_n=Input("click-clear", "n_clicks"),
                                       _tool=Input("map-tool", "value")),
          prevent_initial_call=True)
def vertices_cleared(_n, _tool):
    return {"vertices": []}


@callback(output={**ADDED, **VERTICES}, inputs=dict(_n=Input("click-close", "n_clicks")),
          state=dict(regions=State("regions", "data"), vertices=State("vertices", "data")),
          prevent_initial_call=True)
def clicked_shape_closed(_n, regions, vertices):
    from budget.region import region_from_vertices

    outputs = {**ADDED, **VERTICES}
    vertices = list(vertices or [])
    if len(vertices) < 3:
        return named(outputs, message=f"A region needs at least 3 vertices; {len(vertices)} "
                     "placed so far — click more points on the map.",
                     message_class="notice error")
    try:
        region = region_from_vertices([v[0] for v in vertices], [v[1] for v in vertices])
    except Exception as exc:  # noqa: BLE001
        return failed(outputs, exc, "making the region")
    return added(regions, region, "Clicked shape {n}", vertices=[])


@callback(output=ADDED, inputs=dict(_n=Input("box-add", "n_clicks")),
          state=dict(regions=State("regions", "data"), west=State("box-west", "value"),
                     south=State("box-south", "value"), east=State("box-east", "value"),
                     north=State("box-north", "value")),
          prevent_initial_call=True)
def typed_box_added(_n, regions, west, south, east, north):
    from budget.region import region_from_bbox

    try:
        return added(regions, region_from_bbox(west, south, east, north), "Typed box {n}")
    except Exception as exc:  # noqa: BLE001
        return failed(ADDED, exc, "making the box")


PICKER = {
    "feature_row": _out("feature-row", "style"),
    "feature_options": _out("feature", "options"),
    "feature_value": _out("feature", "value"),
    "held": _out("upload-held", "data"),
}
UPLOADED = {**ADDED, **PICKER, "upload_contents": _out("upload", "contents")}


@callback(output=UPLOADED, inputs=dict(contents=Input("upload", "contents")),
          state=dict(filename=State("upload", "filename"), regions=State("regions", "data")),
          prevent_initial_call=True)
def file_uploaded(contents, filename, regions):
    """An uploaded file: one feature becomes a region; several offer a picker."""
    from budget.region import region_from_upload

    if not contents:
        raise PreventUpdate
    name = Path(filename or "upload").name
    try:
        data = decode_upload(contents, name)
        feats = upload_features(name, data)
        if len(feats) > 1:
            token = uuid.uuid4().hex
            current().held_uploads.put(token, (name, data))
            choices = [{"label": f"{f['name']}" + (f" ({f['geometry']})" if f.get("geometry")
                        else ""), "value": f["index"]} for f in feats]
            return named(UPLOADED, feature_row={"display": "flex"}, feature_options=choices,
                         feature_value=feats[0]["index"], held=token,
                         message=f"'{name}' holds {len(feats)} features; pick one and press "
                         "“Use this feature”.", message_class="notice", upload_contents=None)
        region = region_from_upload(name, data)
        return added(regions, region, region.name or Path(name).stem, upload_contents=None,
                     feature_row={"display": "none"}, feature_options=no_update,
                     feature_value=no_update, held=None)
    except Exception as exc:  # noqa: BLE001
        answer = failed(UPLOADED, exc, "reading the uploaded file")
        answer["upload_contents"] = None
        return answer


@callback(output={**ADDED, "feature_row": PICKER["feature_row"], "held": PICKER["held"]},
          inputs=dict(_n=Input("feature-use", "n_clicks")),
          state=dict(held=State("upload-held", "data"), feature=State("feature", "value"),
                     regions=State("regions", "data")),
          prevent_initial_call=True)
def feature_used(_n, held, feature, regions):
    from budget.region import region_from_upload

    outputs = {**ADDED, "feature_row": PICKER["feature_row"], "held": PICKER["held"]}
    if not held:
        raise PreventUpdate
    stored = current().held_uploads.get(held)
    if stored is None:
        return named(outputs, message="The uploaded file has expired; upload it again.",
                     message_class="notice error")
    name, data = stored
    try:
        region = region_from_upload(name, data, feature=int(feature))
        return added(regions, region, region.name or f"{Path(name).stem} {feature}",
                     feature_row={"display": "none"}, held=None)
    except Exception as exc:  # noqa: BLE001
        return failed(outputs, exc, "reading the feature")


RENAMED = {k: ADDED[k] for k in ("regions", "options", "message", "message_class")}


@callback(output=RENAMED, inputs=dict(_n=Input("region-rename", "n_clicks")),
          state=dict(regions=State("regions", "data"), selected=State("region-select", "value"),
                     typed=State("region-name", "value")),
          prevent_initial_call=True)
def region_renamed(_n, regions, selected, typed):
    new_name = (typed or "").strip()
    regions = list(regions or [])
    if not selected or not new_name:
        return named(RENAMED, message="Choose a region and type a name first.",
                     message_class="notice error")
    for r in regions:
        if r["id"] == selected:
            r["name"] = new_name
            r["geojson"].setdefault("properties", {})["name"] = new_name
    return named(RENAMED, regions=regions, options=options(regions), message="",
                 message_class="notice")


@callback(output=ADDED, inputs=dict(_n=Input("region-remove", "n_clicks")),
          state=dict(regions=State("regions", "data"), selected=State("region-select", "value")),
          prevent_initial_call=True)
def region_removed(_n, regions, selected):
    if not selected:
        raise PreventUpdate
    left = [r for r in regions or [] if r["id"] != selected]
    return named(ADDED, regions=left, options=options(left),
                 selected=left[-1]["id"] if left else None, message="",
                 message_class="notice", name=left[-1]["name"] if left else "")


@callback(output={"name": ADDED["name"], "message": ADDED["message"],
                  "message_class": ADDED["message_class"]},
          inputs=dict(selected=Input("region-select", "value")),
          state=dict(regions=State("regions", "data"), shown=State("region-message", "children")),
          prevent_initial_call=True)
def region_selected(selected, regions, shown=None):
    """Choosing a region clears messages about another one.

    A region just added comes selected with its own message ("Added “name”…") and its name
    set: both are left as they are.
    """
    name = next((r["name"] for r in regions or [] if r["id"] == selected), "")
    if name and isinstance(shown, str) and f"“{name}”" in shown:
        raise PreventUpdate
    return {"name": name, "message": "", "message_class": "notice"}


@callback(
    Output("region-info", "children"),
    Output("region-actions", "style"),
    Input("regions", "data"),
    Input("region-select", "value"),
)
def region_info(regions, selected):
    """The chosen region's area and shape; Remove, Rename and Download only when one is chosen."""
    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        return ("Draw a box or a shape on the map, click vertices, upload a file or type a box.",
                {"display": "none"})
    kind = "box" if rec.get("kind") == "bbox" else f"{rec.get('vertices', 0)} vertices"
    return f"{rec['area_km2']:,.0f} km² · {kind}", {}


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
    import json

    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        raise PreventUpdate
    collection = {"type": "FeatureCollection", "features": [rec["geojson"]]}
    return dcc.send_string(json.dumps(collection, indent=1), f"{slug(rec['name'])}.geojson")


