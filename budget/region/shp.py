"""The shapefile readers: a .shp with its sidecar files, or a .zip holding one shapefile.

Shapefile rings are clockwise outside and counter-clockwise for holes; they are normalised
like any other input.  A .prj naming a projected coordinate system is converted to
longitude-latitude with pyproj (and noted in Region.warnings).
"""

from __future__ import annotations

import io
import warnings as warnings_module

import numpy as np

from ..errors import RegionError
from .archive import files_from_disk, files_from_zip, read_capped
from .features import FeatureSet
from .source import Source


def read_shapefile(src: Source, limit: int) -> FeatureSet:
    """A .shp: from disk with the .shx/.dbf/.prj beside it, or uploaded bytes on its own."""
    if src.path is not None:
        files = files_from_disk(src.path, limit)
    else:
        shown = src.shown or "the uploaded shapefile"
        data = src.data if src.is_stream else io.BytesIO(bytes(src.data))
        files = {"shp": read_capped(data, limit, shown, limit)}
    return features_from_members(files, src)


def read_zipped_shapefile(src: Source, limit: int) -> FeatureSet:
    """A .zip holding one shapefile (path, bytes or stream); members stream from the archive."""
    return features_from_members(files_from_zip(src, limit), src)


def features_from_members(files: dict[str, bytes], src: Source) -> FeatureSet:
    """Features of a shapefile given as {"shp": bytes, "shx": ..., "dbf": ..., "prj": ...}."""
    import shapefile  # pyshp

    shown = src.shown or "the uploaded shapefile"
    where = f" in '{shown}'"
    warnings: list[str] = []
    with warnings_module.catch_warnings(record=True) as caught:
        warnings_module.simplefilter("always")
        feats = _read_shapes(shapefile, files, where, shown, warnings)
    for w in caught:
        warnings.append(f"Reading '{shown}': {w.message}")
    return FeatureSet(feats, where, src.stem, "shapefile", warnings)


def _read_shapes(shapefile, files, where, shown, warnings):
    try:
        reader = shapefile.Reader(
            shp=io.BytesIO(files["shp"]),
            dbf=io.BytesIO(files["dbf"]) if "dbf" in files else None,
            shx=io.BytesIO(files["shx"]) if "shx" in files else None,
        )
        shapes = reader.shapes()
        if "dbf" in files:
            field_names = [f[0] for f in reader.fields[1:]]
            records = [dict(zip(field_names, list(r))) for r in reader.records()]
        else:
            records = [{} for _ in shapes]
            warnings.append(f"No .dbf file came with '{shown}', so features have no names.")
    except shapefile.ShapefileException as exc:
        raise RegionError(
            f"The shapefile{where} cannot be read ({exc}); give the .shp together with its .shx "
            "and .dbf files, or all of them in one .zip."
        ) from None
    except Exception as exc:  # corrupt binary data surfaces as struct/index errors
        raise RegionError(
            f"The shapefile{where} is damaged or not a shapefile ({exc.__class__.__name__}); "
            "export it again."
        ) from None
    transform = None
    if "prj" in files:
        transform = _prj_transformer(files["prj"], shown)
        if transform is not None:
            warnings.append(
                f"'{shown}' is in a projected coordinate system; its vertices were converted "
                "to longitude-latitude (edges stay straight between the converted vertices)."
            )
    feats = []
    for i, (shape, rec) in enumerate(zip(shapes, records)):
        if shape.shapeType == shapefile.NULL:
            geom = None
        else:
            geom = shape.__geo_interface__
            if transform is not None:
                geom = _transform_geom(geom, transform)
        rec = {k: (v if isinstance(v, (str, int, float, bool)) or v is None else str(v))
               for k, v in rec.items()}
        feats.append({"type": "Feature", "properties": rec, "geometry": geom})
    if not feats:
        raise RegionError(f"The shapefile{where} holds no shapes; add a polygon.")
    return feats


def _prj_transformer(prj: bytes, shown: str):
    """A pyproj Transformer to lon-lat when the .prj names a projected CRS, else None."""
    from pyproj import CRS, Transformer
    from pyproj.exceptions import CRSError

    try:
        crs = CRS.from_wkt(prj.decode("latin-1"))
    except CRSError:
        raise RegionError(
            f"The .prj file of '{shown}' does not describe a coordinate system pyproj can read; "
            "remove it if the shapefile is in longitude-latitude, or export it again."
        ) from None
    if crs.is_geographic:
        return None
    return Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)


def _transform_geom(geom: dict, transformer) -> dict:
    def tr_ring(ring):
        xy = np.asarray(ring, dtype=float)
        x, y = transformer.transform(xy[:, 0], xy[:, 1])
        return np.c_[x, y].tolist()

    if geom["type"] == "Polygon":
        return {"type": "Polygon", "coordinates": [tr_ring(r) for r in geom["coordinates"]]}
    if geom["type"] == "MultiPolygon":
        return {"type": "MultiPolygon",
                "coordinates": [[tr_ring(r) for r in p] for p in geom["coordinates"]]}
    return geom
