"""Features, whatever file they came from: naming, picking one, and turning one into a Region.

Every reader (budget/region/readers.py) returns a :class:`FeatureSet`: GeoJSON-like feature
dicts (``{"type": "Feature", "properties": {...}, "geometry": {...}}``) plus how to name
their source in messages.  Everything after that is format-independent.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import RegionError
from .box import region_from_bbox
from .model import Region
from .normalise import build_region, prepare_ring

#: The most geometries a GeometryCollection may hold, however deeply nested.
MAX_GEOMETRIES = 1_000_000

#: Properties that name a feature, in order of preference.
NAME_KEYS = ("name", "NAME", "Name", "title", "label", "id", "ID")


@dataclass
class FeatureSet:
    """The features of one source, as a reader returns them."""

    features: list  # GeoJSON-like Feature dicts (a malformed entry stays as it came)
    where: str  # " in 'basins.zip'" or "" — appended to messages
    stem: str | None  # file name without suffix, the fallback region name
    kind: str = "geojson"  # "geojson" or "shapefile"
    warnings: list[str] = field(default_factory=list)  # soft issues met while reading


def feature_name(props: dict | None) -> str | None:
    if not props or not isinstance(props, dict):
        return None
    for key in NAME_KEYS:
        if props.get(key) not in (None, ""):
            return str(props[key])
    return None


def feature_summary(i: int, feat: dict) -> dict:
    if not isinstance(feat, dict):
        feat = {}
    props = feat.get("properties") or {}
    geom = feat.get("geometry") or {}
    short = {k: v for k, v in list(props.items())[:6]
             if isinstance(v, (str, int, float, bool)) or v is None}
    return {
        "index": i,
        "name": feature_name(props) or f"feature {i}",
        "geometry": geom.get("type") if isinstance(geom, dict) else None,
        "properties": short,
    }


def select_feature(feats: list[dict], feature, where: str) -> tuple[int, dict]:
    names = [feature_summary(i, f)["name"] for i, f in enumerate(feats)]
    listing = ", ".join(f"{i}: {n}" for i, n in enumerate(names[:20]))
    if len(names) > 20:
        listing += f", … ({len(names)} in all)"
    if feature is None:
        if len(feats) == 1:
            return 0, feats[0]
        subject = f"The region file{where[3:]}" if where.startswith(" in ") else "The FeatureCollection"
        raise RegionError(
            f"{subject} holds {len(feats)} features; choose one by name or index "
            f"({listing})."
        )
    if isinstance(feature, (int, np.integer)) and not isinstance(feature, bool):
        idx = int(feature)
        if -len(feats) <= idx < len(feats):
            return idx % len(feats), feats[idx]
        raise RegionError(
            f"There is no feature number {idx}{where}; it holds {len(feats)} features "
            f"({listing})."
        )
    key = str(feature)
    matches = []
    for i, f in enumerate(feats):
        props = (f.get("properties") or {}) if isinstance(f, dict) else {}
        if not isinstance(props, dict):
            props = {}
        if any(str(v) == key for v in props.values() if v is not None) or (isinstance(f, dict) and str(f.get("id")) == key):
            matches.append(i)
    if len(matches) == 1:
        return matches[0], feats[matches[0]]
    if len(matches) > 1:
        raise RegionError(
            f"{len(matches)} features{where} match '{key}' (numbers "
            f"{', '.join(map(str, matches[:10]))}); choose one by index instead."
        )
    if key.lstrip("-").isdigit():
        return select_feature(feats, int(key), where)
    raise RegionError(
        f"No feature{where} has a property equal to '{key}'; available: {listing}."
    )


def geometry_rings(geom: Any, where: str) -> tuple[list[list], bool]:
    """List of polygons (each a list of rings) and whether it was a MultiPolygon.

    Geometry collections are walked with an explicit stack, so a file nested very deep gets a
    sentence, not a RecursionError.
    """
    if not isinstance(geom, dict):
        raise RegionError(
            f"The feature{where} has no geometry; give a Polygon or MultiPolygon."
        )
    polys: list = []
    stack, visited = [geom], 0
    while stack:
        g = stack.pop()
        visited += 1
        t = g.get("type") if isinstance(g, dict) else None
        coords = g.get("coordinates") if isinstance(g, dict) else None
        if t == "GeometryCollection":
            members = g.get("geometries") or []
            if visited + len(stack) + len(members) > MAX_GEOMETRIES:
                raise RegionError(
                    f"The GeometryCollection{where} holds more than {MAX_GEOMETRIES:,} "
                    "geometries, counting those nested inside one another; give a Polygon or "
                    "MultiPolygon."
                )
            stack.extend(reversed(members))
            continue
        if not isinstance(g, dict):
            raise RegionError(
                f"The feature{where} has no geometry; give a Polygon or MultiPolygon."
            )
        if t not in ("Polygon", "MultiPolygon"):
            raise RegionError(
                f"The geometry type '{t}'{where} is not supported; give a Polygon or "
                "MultiPolygon (a closed ring of vertices)."
            )
        found = [coords] if t == "Polygon" else coords
        if not isinstance(found, list) or not found or any(
            not isinstance(p, list) or not p for p in found
        ):
            raise RegionError(
                f"The {t}{where} has no coordinates; give at least one ring of [longitude, "
                "latitude] vertices."
            )
        polys.extend(found)
    if not polys:
        raise RegionError(
            f"The GeometryCollection{where} has no coordinates; give at least one ring of "
            "[longitude, latitude] vertices."
        )
    return polys, geom.get("type") != "Polygon"


def region_from_polys(polys, multi, name, great_circle, where) -> Region:
    raw_parts = []
    several = len(polys) > 1
    for p_i, rings in enumerate(polys):
        prepared = []
        for r_i, ring in enumerate(rings):
            if r_i == 0:
                label = f"part {p_i + 1} " if several else ""
            else:
                label = f"part {p_i + 1} hole {r_i} " if several else f"hole {r_i} "
            prepared.append(prepare_ring(ring, label, where, great_circle))
        raw_parts.append(prepared)
    return build_region(raw_parts, name, great_circle, multi, where)


def _maybe_bbox_region(feat: dict, name: str | None) -> Region | None:
    """A Feature written by Region.to_geojson for a box comes back as the same box."""
    props = feat.get("properties") or {}
    bb = feat.get("bbox")
    if props.get("region_kind") != "bbox" or not isinstance(bb, list) or len(bb) != 4:
        return None
    try:
        region = region_from_bbox(*bb, name=name)
    except RegionError:
        return None
    # only trust the bbox member when the geometry is that box
    geom_area = None
    try:
        polys, multi = geometry_rings(feat.get("geometry"), "")
        geom_area = region_from_polys(polys, multi, name, False, "").area_m2()
    except RegionError:
        return None
    if not np.isclose(geom_area, region.area_m2(), rtol=1e-9):
        return None
    return region


def region_from_features(fs: FeatureSet, feature=None, name: str | None = None,
                         great_circle: bool | None = None) -> Region:
    """The region of one feature of ``fs``: ``feature`` is a property value or an index."""
    idx, feat = select_feature(fs.features, feature, fs.where)
    return region_from_feature(fs, idx, feat, name, great_circle)


def region_from_feature(fs: FeatureSet, idx: int, feat, name: str | None = None,
                        great_circle: bool | None = None) -> Region:
    """The region of feature number ``idx`` of ``fs`` (``feat`` is that feature).

    ``great_circle=None`` takes a GeoJSON feature's "great_circle" property, else False.
    """
    if not isinstance(feat, dict):
        raise RegionError(f"Feature {idx}{fs.where} is not a GeoJSON object; give a Feature.")
    props = feat.get("properties") or {}
    fname = feature_name(props)
    region_name = name or fname or fs.stem or "region"
    where = f" (feature {fname or idx}){fs.where}" if len(fs.features) > 1 else fs.where
    if great_circle is None:
        great_circle = fs.kind == "geojson" and bool(props.get("great_circle", False))
    if feat.get("geometry") is None and fs.kind == "shapefile":
        raise RegionError(f"The shape{where} is empty; choose a feature with a polygon.")
    region = None if great_circle else _maybe_bbox_region(feat, region_name)
    if region is None:
        polys, multi = geometry_rings(feat.get("geometry"), where)
        region = region_from_polys(polys, multi, region_name, great_circle, where)
    region.warnings.extend(fs.warnings)
    return region
