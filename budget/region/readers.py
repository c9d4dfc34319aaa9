"""The one table of region readers, and the public entry points that use it.

Every file-like source goes through :func:`read_features`: the table picks the reader by the
file name's suffix (or, for unnamed bytes, by their first bytes), the reader returns a
:class:`~budget.region.features.FeatureSet`, and everything after that — picking a feature,
validating it, naming it — is the same for every format.  A new format is one new reader
function and one row in :data:`READERS`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from ..errors import RegionError
from .archive import SHAPEFILE_LIMIT_BYTES, UPLOAD_EXPANDED_LIMIT_BYTES
from .box import parse_bbox, region_from_bbox
from .features import FeatureSet, feature_summary, region_from_features
from .geojson import read_geojson
from .model import Region
from .shp import read_shapefile, read_zipped_shapefile
from .source import Source, as_source


@dataclass(frozen=True)
class Reader:
    """One region file format."""

    name: str  # for messages
    suffixes: tuple[str, ...]  # file-name suffixes, lower case
    magic: tuple[bytes, ...]  # first bytes that identify unnamed data
    read: Callable[[Source, int], FeatureSet]  # (source, expanded-size limit) -> features


READERS: tuple[Reader, ...] = (
    Reader("GeoJSON", (".geojson", ".json"), (b"{", b"["), read_geojson),
    Reader("shapefile", (".shp",), (b"\x00\x00\x27\x0a",), read_shapefile),  # file code 9994
    Reader("zipped shapefile", (".zip",), (b"PK\x03\x04", b"PK\x05\x06"), read_zipped_shapefile),
)


def _suffix_list() -> str:
    sx = [s for r in READERS for s in r.suffixes]
    return ", ".join(sx[:-1]) + " or " + sx[-1]


def reader_for(src: Source) -> Reader:
    """The reader of ``src``: by suffix; data handed over without a name, by its first bytes."""
    for reader in READERS:
        if src.suffix in reader.suffixes:
            return reader
    if src.path is not None and src.suffix == "":
        return READERS[0]  # a file without a suffix is taken as GeoJSON
    if src.shown is None:
        head = src.head(8).lstrip()
        for reader in READERS:
            if head and any(head.startswith(m) for m in reader.magic):
                return reader
        return READERS[0]
    if src.path is not None:
        raise RegionError(
            f"The region file '{src.shown}' has an unsupported type '{src.suffix}'; give a "
            f"{_suffix_list()} file."
        )
    raise RegionError(
        f"The uploaded file '{src.shown}' has an unsupported type '{src.suffix or '(none)'}'; "
        f"upload a {_suffix_list()} file (a .zip holding one shapefile)."
    )


def _checked(src: Source) -> Source:
    """``src``, after checking that a path names an existing file."""
    if src.path is not None:
        if not src.path.exists():
            raise RegionError(f"The region file '{src.path}' does not exist; check the path.")
        if src.path.is_dir():
            raise RegionError(
                f"The region path '{src.path}' is a folder; give a {_suffix_list()} file."
            )
    return src


def read_features(source, filename: str | None = None, limit: int | None = None) -> FeatureSet:
    """The features of a region source (path, GeoJSON object or text, bytes, stream).

    ``filename`` names in-memory data (an upload) and picks its reader; ``limit`` caps the
    expanded size of a shapefile (default :data:`SHAPEFILE_LIMIT_BYTES` for files on disk,
    :data:`UPLOAD_EXPANDED_LIMIT_BYTES` for data in memory).
    """
    src = as_source(source, filename)
    reader = reader_for(src)
    if limit is None:
        limit = SHAPEFILE_LIMIT_BYTES if src.path is not None else UPLOAD_EXPANDED_LIMIT_BYTES
    return reader.read(_checked(src), limit)


def list_features(obj_or_path, filename: str | None = None) -> list[dict]:
    """One summary per feature: {"index", "name", "geometry", "properties"} (for a picker).

    Works for every format of the reader table, from a path or from data in memory (a
    GeoJSON object, text, bytes, or a zip's bytes or stream); ``filename`` names uploaded data.
    """
    fs = read_features(obj_or_path, filename)
    return [feature_summary(i, f) for i, f in enumerate(fs.features)]


def region_from_geojson(obj_or_path, feature=None, name: str | None = None,
                        great_circle: bool | None = None) -> Region:
    """A region from GeoJSON: a Polygon, MultiPolygon, Feature or FeatureCollection.

    ``obj_or_path`` is a parsed object, JSON text, bytes or a file path.  ``feature`` picks a
    feature by any property value (e.g. its name) or by index (0-based, as list_features).
    ``great_circle=None`` takes the "great_circle" property when present, else False.
    MultiPolygon parts cut at the antimeridian are joined back into one part.
    """
    fs = read_geojson(_checked(as_source(obj_or_path)))
    return region_from_features(fs, feature, name, great_circle)


def region_from_shapefile(path, feature=None, name: str | None = None,
                          great_circle: bool = False) -> Region:
    """A region from a shapefile (.shp with .shx/.dbf beside it, or a .zip holding one)."""
    return region_from_features(read_features(path), feature, name, bool(great_circle))


def region_from_upload(filename: str, data, feature=None, name: str | None = None,
                       great_circle: bool = False,
                       limit: int = UPLOAD_EXPANDED_LIMIT_BYTES) -> Region:
    """A region from uploaded bytes (or a binary stream), by the file name's suffix."""
    fs = read_features(data, filename=filename, limit=limit)
    return region_from_features(fs, feature, name, great_circle or None)


def load_region(path=None, bbox=None, feature=None, great_circle: bool = False,
                name: str | None = None) -> Region:
    """The region for the command line: a file (GeoJSON, shapefile, .zip) or a bbox.

    ``bbox`` is "W,S,E,N" or a 4-sequence; ``feature`` a name/property value or an index.
    """
    if path is not None and bbox is not None:
        raise RegionError("Give either a region file or a bbox, not both.")
    if path is None and bbox is None:
        raise RegionError(
            "No region given; give a GeoJSON or shapefile path, or a bbox west,south,east,north."
        )
    if bbox is not None:
        region = region_from_bbox(*parse_bbox(bbox), name=name)
        if great_circle:
            region.warnings.append(
                "A box keeps its edges along meridians and parallels; great-circle edges were "
                "not used."
            )
        return region
    return region_from_features(read_features(path), feature, name, great_circle or None)
