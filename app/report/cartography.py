"""Offline cartography for the report maps: shipped Natural Earth lines and projection choice.

The shapefiles under assets/cartography are written by assets/build_cartography.py in
cartopy's own folder layout.  :func:`configure_cartopy` points cartopy's data directories at
them, so that cartopy finds its files locally; the maps draw them with ``add_geometries`` and
never ask cartopy for a built-in feature.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

CARTOGRAPHY_DIR = Path(__file__).resolve().parents[2] / "assets" / "cartography"


def configure_cartopy() -> None:
    """Point cartopy's data directories at the shipped folder (idempotent)."""
    import cartopy

    cartopy.config["pre_existing_data_dir"] = CARTOGRAPHY_DIR
    cartopy.config["data_dir"] = CARTOGRAPHY_DIR


def shapefile_path(scale: str, kind: str) -> Path:
    """The shipped shapefile for ``kind`` ("coastline" or "borders") at ``scale`` (110m, 50m)."""
    if kind == "coastline":
        return CARTOGRAPHY_DIR / "shapefiles" / "natural_earth" / "physical" / f"ne_{scale}_coastline.shp"
    return CARTOGRAPHY_DIR / "shapefiles" / "natural_earth" / "cultural" / f"ne_{scale}_admin_0_boundary_lines_land.shp"


@lru_cache(maxsize=8)
def shipped_lines(scale: str, kind: str) -> tuple:
    """Shapely line geometries from a shipped shapefile (read once per process)."""
    import shapefile  # pyshp, a dependency of budget.region
    from shapely.geometry import LineString

    path = shapefile_path(scale, kind)
    if not path.exists():
        from budget.errors import RequestError

        raise RequestError(
            f"The map data {path} is missing; restore assets/cartography from the repository "
            "or rebuild it with assets/build_cartography.py."
        )
    with shapefile.Reader(str(path)) as reader:
        lines = []
        for shape in reader.iterShapes():
            starts = list(shape.parts) + [len(shape.points)]
            for a, b in zip(starts[:-1], starts[1:]):
                if b - a > 1:
                    lines.append(LineString(shape.points[a:b]))
    return tuple(lines)


def lines_near(scale: str, kind: str, extent, margin: float = 5.0) -> list:
    """The shipped lines that reach into a lon/lat extent (west, east, south, north), clipped to
    it plus a margin, so that cartopy projects only what shows.  The extent may use any
    longitude frame (a region across the antimeridian runs past 180)."""
    import shapely
    import shapely.affinity

    lines = np.asarray(shipped_lines(scale, kind), dtype=object)
    west, east, south, north = extent
    if east - west >= 359:
        return list(lines)
    bounds = shapely.bounds(lines)
    keep = []
    for shift in (-360.0, 0.0, 360.0):
        w, e = west - margin - shift, east + margin - shift
        hit = (bounds[:, 0] <= e) & (bounds[:, 2] >= w) & (bounds[:, 1] <= north + margin) & (bounds[:, 3] >= south - margin)
        for line in lines[hit]:
            piece = shapely.clip_by_rect(line, w, south - margin, e, north + margin)
            if not piece.is_empty:
                keep.append(shapely.affinity.translate(piece, xoff=shift) if shift else piece)
    return keep


@dataclass(frozen=True)
class MapFrame:
    """Where a map looks: projection and lon/lat extent (west, east, south, north)."""

    kind: str  # "conic", "azimuthal", "north-polar", "south-polar", "global"
    central_lon: float
    central_lat: float
    extent: tuple[float, float, float, float]
    parallels: tuple[float, float] = (0.0, 0.0)

    def projection(self):
        import cartopy.crs as ccrs

        if self.kind == "global":
            return ccrs.Robinson(central_longitude=self.central_lon)
        if self.kind == "north-polar":
            return ccrs.NorthPolarStereo(central_longitude=self.central_lon)
        if self.kind == "south-polar":
            return ccrs.SouthPolarStereo(central_longitude=self.central_lon)
        if self.kind == "azimuthal":
            return ccrs.LambertAzimuthalEqualArea(central_longitude=self.central_lon, central_latitude=self.central_lat)
        return ccrs.AlbersEqualArea(central_longitude=self.central_lon, central_latitude=self.central_lat,
                                    standard_parallels=self.parallels)

    @property
    def scale(self) -> str:
        """Natural Earth scale for this extent: 1:50m for regional maps, 1:110m beyond."""
        west, east, south, north = self.extent
        return "50m" if max(east - west, north - south) <= 60 else "110m"


def choose_frame(west: float, south: float, east: float, north: float,
                 grid: tuple[float, float, float, float] | None = None) -> MapFrame:
    """A projection suited to a region with these bounds (continuous longitudes, degrees).

    Equal-area conic (Albers) centred on mid-latitude regions, with standard parallels at one
    sixth and five sixths of the latitude range (Snyder 1987, Map Projections: A Working
    Manual, USGS PP 1395, p. 99); Lambert azimuthal equal-area centred on regions near the
    equator, where a conic degenerates; polar stereographic for regions reaching 70° with no
    part equatorward of 45°; Robinson for (nearly) the whole globe.  ``grid`` limits the
    extent to the data (west, south, east, north).
    """
    span_lon, span_lat = east - west, north - south
    pad_lon = max(0.35 * span_lon, 3.0)
    pad_lat = max(0.35 * span_lat, 3.0)
    w, e = west - pad_lon, east + pad_lon
    s, n = max(south - pad_lat, -90.0), min(north + pad_lat, 90.0)
    if grid is not None:
        gw, gs, ge, gn = grid
        if ge - gw < 359:
            w, e = max(w, gw), min(e, ge)
        s, n = max(s, gs), min(n, gn)
    clon = 0.5 * (west + east)
    clat = 0.5 * (south + north)
    if span_lon >= 300 or (e - w >= 300 and n - s >= 120):
        return MapFrame("global", float(clon if span_lon < 359 else 0.0), 0.0, (-180.0, 180.0, -90.0, 90.0))
    if north >= 70 and south >= 45:
        return MapFrame("north-polar", float(clon), 90.0, (w, e, max(s, 40.0), 90.0))
    if south <= -70 and north <= -45:
        return MapFrame("south-polar", float(clon), -90.0, (w, e, -90.0, min(n, -40.0)))
    if abs(clat) < 15 or south * north < 0 and min(abs(south), abs(north)) > 5:
        return MapFrame("azimuthal", float(clon), float(clat), (w, e, s, n))
    parallels = (south + span_lat / 6.0, north - span_lat / 6.0)
    if span_lat < 1e-6:
        parallels = (clat, clat)
    return MapFrame("conic", float(clon), float(clat), (w, e, s, n), tuple(float(p) for p in parallels))


def thin_arrows(lon: np.ndarray, lat: np.ndarray, target: int) -> tuple[slice, slice]:
    """Strides so that about ``target`` arrows fit along the longer side of the grid window."""
    step = max(1, int(np.ceil(max(lon.size, lat.size) / max(target, 1))))
    return slice(step // 2, None, step), slice(step // 2, None, step)
