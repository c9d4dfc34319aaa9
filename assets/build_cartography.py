"""Rebuild all shipped cartography from one source: the dashboard's coastline GeoJSON and the
shapefiles the report maps read (cartopy's own folder layout).

Source data: Natural Earth 4.1.0 (public domain, https://www.naturalearthdata.com) as
redistributed in TopoJSON by the npm package ``world-atlas`` 2.0.2: ``countries-110m.json`` and
``countries-50m.json``, each holding a ``countries`` and a ``land`` object.  The package is only
needed to rebuild; the dashboard and the figures read the files written here.

How to rebuild (offline once the tarball is fetched from the npm registry):

    npm pack world-atlas@2.0.2 && tar xzf world-atlas-2.0.2.tgz
    python assets/build_cartography.py package assets

What it writes under the output folder (``assets``):

    coastline_110m.geojson                      dashboard coastline (one MultiLineString)
    cartography/shapefiles/natural_earth/physical/ne_{110m,50m}_coastline.shp (+ .shx .dbf .prj)
    cartography/shapefiles/natural_earth/cultural/ne_{110m,50m}_admin_0_boundary_lines_land.shp

The shapefile names and folders follow cartopy's ``pre_existing_data_dir`` layout, so cartopy
finds them without a download (app/report.py points cartopy there).

Method: the quantised, delta-encoded TopoJSON arcs are decoded (scale/translate transform; a
negative arc index ~i means arc i reversed).  Coastlines are the rings of the ``land`` object
with the artificial segments along lon ±180 and lat −90 (where the polygons were cut) dropped,
split wherever consecutive longitudes jump by more than 180°.  Land borders are the arcs that
two different countries share (the usual TopoJSON "mesh" of interior arcs).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

SCALES = ("110m", "50m")
SOURCE_NOTE = "Natural Earth 4.1.0 (public domain) via npm world-atlas 2.0.2; rebuilt by assets/build_cartography.py"
WGS84_PRJ = (
    'GEOGCS["GCS_WGS_1984",DATUM["D_WGS_1984",SPHEROID["WGS_1984",6378137.0,298.257223563]],'
    'PRIMEM["Greenwich",0.0],UNIT["Degree",0.0174532925199433]]'
)


def decode_arcs(topology: dict) -> list[list[tuple[float, float]]]:
    sx, sy = topology["transform"]["scale"]
    tx, ty = topology["transform"]["translate"]
    arcs = []
    for arc in topology["arcs"]:
        x = y = 0
        points = []
        for dx, dy in arc:
            x += dx
            y += dy
            points.append((x * sx + tx, y * sy + ty))
        arcs.append(points)
    return arcs


def _ring(arcs: list, indices: list[int]) -> list[tuple[float, float]]:
    points: list[tuple[float, float]] = []
    for index in indices:
        arc = arcs[index] if index >= 0 else arcs[~index][::-1]
        # consecutive arcs share their end point
        points.extend(arc if not points else arc[1:])
    return points


def _artificial(a: tuple[float, float], b: tuple[float, float]) -> bool:
    """A segment along the map's cut lines rather than a real shore or border."""
    on_dateline = abs(abs(a[0]) - 180) < 1e-6 and abs(abs(b[0]) - 180) < 1e-6
    on_south_edge = a[1] < -89.999 and b[1] < -89.999
    return on_dateline or on_south_edge or abs(a[0] - b[0]) > 180


def _split(points: list[tuple[float, float]]) -> list[list[list[float]]]:
    """Cut a polyline at artificial segments; coordinates rounded to 0.001°."""
    lines: list[list[list[float]]] = []
    current: list[list[float]] = []
    for a, b in zip(points[:-1], points[1:]):
        if _artificial(a, b):
            if len(current) > 1:
                lines.append(current)
            current = []
            continue
        if not current:
            current = [[round(a[0], 3), round(a[1], 3)]]
        current.append([round(b[0], 3), round(b[1], 3)])
    if len(current) > 1:
        lines.append(current)
    return lines


def _polygons(geometry: dict) -> list:
    if geometry.get("type") == "MultiPolygon":
        return geometry["arcs"]
    if geometry.get("type") == "Polygon":
        return [geometry["arcs"]]
    return []


def coastlines(topology: dict) -> list[list[list[float]]]:
    """Shore lines of the ``land`` object, in lon/lat degrees (−180..180)."""
    arcs = decode_arcs(topology)
    lines: list[list[list[float]]] = []
    for geometry in topology["objects"]["land"]["geometries"]:
        for polygon in _polygons(geometry):
            for ring_indices in polygon:
                lines.extend(_split(_ring(arcs, ring_indices)))
    return lines


def borders(topology: dict) -> list[list[list[float]]]:
    """Land borders: arcs used by two different countries of the ``countries`` object."""
    arcs = decode_arcs(topology)
    owners: dict[int, set[int]] = {}
    for k, geometry in enumerate(topology["objects"]["countries"]["geometries"]):
        for polygon in _polygons(geometry):
            for ring_indices in polygon:
                for index in ring_indices:
                    owners.setdefault(index if index >= 0 else ~index, set()).add(k)
    lines: list[list[list[float]]] = []
    for index in sorted(i for i, who in owners.items() if len(who) > 1):
        lines.extend(_split(arcs[index]))
    return lines


def write_geojson(lines: list, path: Path, scale: str) -> None:
    collection = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"name": "coastline", "source": f"{SOURCE_NOTE} (land, 1:{scale[:-1]} million)"},
                "geometry": {"type": "MultiLineString", "coordinates": lines},
            }
        ],
    }
    path.write_text(json.dumps(collection, separators=(",", ":")), encoding="utf-8")


def write_shapefile(lines: list, path: Path, kind: str) -> None:
    """One polyline record per line, in cartopy's file naming (``path`` ends in .shp)."""
    import shapefile  # pyshp

    path.parent.mkdir(parents=True, exist_ok=True)
    with shapefile.Writer(str(path.with_suffix("")), shapeType=shapefile.POLYLINE) as writer:
        writer.field("featurecla", "C", size=24)
        for line in lines:
            writer.line([line])
            writer.record(kind)
    path.with_suffix(".prj").write_text(WGS84_PRJ, encoding="ascii")
    (path.parents[2] / "SOURCE.txt").write_text(SOURCE_NOTE + "\n", encoding="utf-8")


def build(source: Path, out: Path) -> list[Path]:
    written = []
    root = out / "cartography" / "shapefiles" / "natural_earth"
    for scale in SCALES:
        topology = json.loads((source / f"countries-{scale}.json").read_text(encoding="utf-8"))
        coast = coastlines(topology)
        targets = {
            root / "physical" / f"ne_{scale}_coastline.shp": (coast, "Coastline"),
            root / "cultural" / f"ne_{scale}_admin_0_boundary_lines_land.shp": (borders(topology), "International boundary"),
        }
        for path, (lines, kind) in targets.items():
            write_shapefile(lines, path, kind)
            written.append(path)
        if scale == "110m":
            write_geojson(coast, out / "coastline_110m.geojson", scale)
            written.append(out / "coastline_110m.geojson")
    return written


def main(argv: list[str]) -> int:
    if len(argv) != 3:
        print("usage: python assets/build_cartography.py WORLD_ATLAS_FOLDER ASSETS_FOLDER")
        return 2
    for path in build(Path(argv[1]), Path(argv[2])):
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
