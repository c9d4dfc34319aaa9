"""Rebuild the offline coastline GeoJSON shipped in this folder.

Source data: Natural Earth land polygons (public domain, https://www.naturalearthdata.com),
as redistributed in TopoJSON by the npm package ``world-atlas`` 2.0.2 (file ``land-110m.json``,
Natural Earth 4.1.0, 1:110m).  The package is only needed to rebuild; the dashboard reads the
GeoJSON written here.

How to rebuild (offline once the tarball is fetched from the npm registry):

    npm pack world-atlas@2.0.2 && tar xzf world-atlas-2.0.2.tgz
    python assets/build_coastline.py package/land-110m.json assets/coastline_110m.geojson

What the script does: decodes the quantised, delta-encoded TopoJSON arcs (scale/translate
transform; a negative arc index ~i means arc i reversed), joins each ring's arcs, then keeps
only real coastline: the artificial segments that run along lon ±180 or lat −90 (where the
land polygons were cut) are dropped, and a line is split wherever consecutive longitudes jump
by more than 180°.  The result is one MultiLineString in lon/lat degrees (−180..180).
"""

from __future__ import annotations

import json
import sys


def _decode_arcs(topology: dict) -> list[list[tuple[float, float]]]:
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
    """A segment along the map's cut lines rather than a real shore."""
    on_dateline = abs(abs(a[0]) - 180) < 1e-6 and abs(abs(b[0]) - 180) < 1e-6
    on_south_edge = a[1] < -89.999 and b[1] < -89.999
    return on_dateline or on_south_edge or abs(a[0] - b[0]) > 180


def coastlines(topology: dict, object_name: str = "land") -> list[list[list[float]]]:
    arcs = _decode_arcs(topology)
    lines: list[list[list[float]]] = []
    for geometry in topology["objects"][object_name]["geometries"]:
        polygons = geometry["arcs"] if geometry["type"] == "MultiPolygon" else [geometry["arcs"]]
        for polygon in polygons:
            for ring_indices in polygon:
                ring = _ring(arcs, ring_indices)
                current: list[list[float]] = []
                for a, b in zip(ring[:-1], ring[1:]):
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


def main(argv: list[str]) -> int:
    if len(argv) != 3:
        print("usage: python assets/build_coastline.py land-110m.json coastline_110m.geojson")
        return 2
    with open(argv[1], encoding="utf-8") as handle:
        topology = json.load(handle)
    collection = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {
                    "name": "coastline",
                    "source": "Natural Earth 4.1.0 land, 1:110m (public domain), "
                    "via npm world-atlas 2.0.2; rebuilt by assets/build_coastline.py",
                },
                "geometry": {"type": "MultiLineString", "coordinates": coastlines(topology)},
            }
        ],
    }
    with open(argv[2], "w", encoding="utf-8") as handle:
        json.dump(collection, handle, separators=(",", ":"))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
