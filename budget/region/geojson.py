"""The GeoJSON reader (RFC 7946): a parsed object, JSON text, bytes, a stream or a file."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from ..errors import RegionError
from .features import FeatureSet
from .source import Source


def read_geojson(src: Source, limit: int | None = None) -> FeatureSet:
    """The features of a GeoJSON source (``limit`` is unused: the text is read as it is)."""
    data = src.data
    if src.path is not None:
        obj = _read_path(src.path)
    elif isinstance(data, (dict, list)):
        obj = data
    elif isinstance(data, str):
        obj = parse_json_text(data, "the region text")
    elif src.shown:
        try:
            text = src.read_bytes().decode("utf-8-sig")
        except UnicodeDecodeError:
            raise RegionError(
                f"The uploaded file '{src.shown}' is not UTF-8 text; upload a GeoJSON file."
            ) from None
        obj = parse_json_text(text, f"The uploaded file '{src.shown}'")
    else:
        text = src.read_bytes().decode("utf-8-sig", errors="replace")
        obj = parse_json_text(text, "the uploaded region")
    return FeatureSet(features_of(obj, src.where), src.where, src.stem, "geojson")


def _read_path(path: Path) -> Any:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise RegionError(
            f"The region file '{path.name}' cannot be read as UTF-8 text "
            f"({exc.__class__.__name__}); give a GeoJSON file."
        ) from None
    return parse_json_text(text, f"The region file '{path.name}'")


def parse_json_text(text: str, what: str) -> Any:
    """Parsed JSON, or one sentence naming ``what`` (also for text nested too deep)."""
    subject = what if what[0].isupper() else what[0].upper() + what[1:]
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise RegionError(
            f"{subject} is not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno}); "
            "fix the file or export it again as GeoJSON."
        ) from None
    except RecursionError:
        raise RegionError(
            f"{subject} is nested too deep to be GeoJSON (arrays or objects inside one another "
            "thousands of levels down); export the region again as a plain Polygon or "
            "MultiPolygon."
        ) from None


def features_of(obj: Any, where: str) -> list:
    """The features of a GeoJSON object (a bare geometry becomes one feature)."""
    if not isinstance(obj, dict) or "type" not in obj:
        raise RegionError(
            f"The region{where} is not a GeoJSON object (no \"type\" member); give a Polygon, "
            "MultiPolygon, Feature or FeatureCollection."
        )
    t = obj["type"]
    if t == "FeatureCollection":
        feats = obj.get("features")
        if not isinstance(feats, list) or not feats:
            raise RegionError(
                f"The FeatureCollection{where} has no features; add a Polygon feature."
            )
        return feats
    if t == "Feature":
        return [obj]
    return [{"type": "Feature", "properties": {}, "geometry": obj}]
