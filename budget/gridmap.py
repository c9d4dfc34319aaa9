"""Regional-model grids: CF grid mappings, native coordinates, map factors and wind rotation.

Regional climate models write rotated-pole grids, WRF and NAM Lambert conformal or polar
stereographic ones (CF conventions, section 5.6 and appendix F: `grid_mapping_name`
rotated_latitude_longitude, lambert_conformal_conic, polar_stereographic). On such a grid the
rows and columns are straight lines of a *native* plane (x, y), and the file holds 2-D latitude
and longitude. Fluxfence keeps the grid as it is:

* points are located in the native plane (pyproj does the projection, both ways);
* the stencil interpolates bilinearly in native coordinates, intersects cells with the region
  in the native plane and measures every piece on the sphere (spherical areas stay exact up to
  the densification of the pieces' edges);
* the gridded divergence uses the orthogonal-coordinate form
  ∇·Q = 1/(hx hy) [∂(hy Qx)/∂x + ∂(hx Qy)/∂y], with the scale factors hx, hy (metres on the
  sphere per native unit) and the angle α of the native x axis from east measured on the
  engine's sphere by finite differences of the mapping (`Metric`). The three supported
  mappings are conformal, so the native axes are orthogonal on the sphere.

Winds that the file gives along the grid axes (CF `grid_eastward_wind`, GRIB
`uvRelativeToGrid` = 1) become earth-relative with `earth_relative`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .catalogue import role
from .constants import EARTH_RADIUS
from .errors import FieldsError

#: CF grid_mapping_name values Fluxfence reads on 2-D grids.
SUPPORTED = ("rotated_latitude_longitude", "lambert_conformal_conic", "polar_stereographic")

#: Finite-difference step for the metric, as a fraction of the grid spacing.
_METRIC_STEP = 1e-3


@dataclass(frozen=True)
class GridMapping:
    """A CF grid mapping: its name and attributes, and the projection both ways."""

    name: str
    attrs: tuple  # sorted (key, value) pairs of the CF attributes, hashable

    @classmethod
    def from_cf(cls, attrs: dict, where: str = "the file") -> "GridMapping":
        """Build from a CF grid-mapping variable's attributes; FieldsError when unsupported."""
        name = str(attrs.get("grid_mapping_name", "")).strip()
        if name not in SUPPORTED:
            raise FieldsError(
                f"The grid mapping {name or '(unnamed)'!r} in {where} is not supported; Fluxfence reads "
                f"{', '.join(SUPPORTED)} or regular longitude-latitude grids: regrid the fields to one of these."
            )
        keep = {k: _plain(v) for k, v in attrs.items() if not str(k).startswith("_")}
        mapping = cls(name, tuple(sorted(keep.items())))
        try:
            mapping.crs
        except Exception as exc:  # pyproj's CRSError and friends
            raise FieldsError(
                f"The {name} grid mapping in {where} lacks parameters pyproj needs ({_first_line(exc)}); "
                "add the CF attributes of that mapping (CF conventions, appendix F)."
            ) from None
        return mapping

    @property
    def cf(self) -> dict:
        return dict(self.attrs)

    @property
    def native_units(self) -> str:
        return "degrees" if self.name == "rotated_latitude_longitude" else "m"

    @cached_property
    def crs(self):
        import pyproj

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pyproj.CRS.from_cf(self.cf)

    @cached_property
    def _transformer(self):
        import pyproj

        crs = self.crs
        base = crs.source_crs if crs.is_derived and crs.is_geographic else crs.geodetic_crs
        return pyproj.Transformer.from_crs(base, crs, always_xy=True)

    def to_native(self, lon, lat):
        """Native (x, y) of longitude-latitude points (degrees); rotated longitudes continuous."""
        x, y = self._transformer.transform(np.asarray(lon, float), np.asarray(lat, float))
        return np.asarray(x, float), np.asarray(y, float)

    def to_lonlat(self, x, y):
        lon, lat = self._transformer.transform(np.asarray(x, float), np.asarray(y, float), direction="INVERSE")
        return np.asarray(lon, float), np.asarray(lat, float)

    def describe(self) -> str:
        skip = {"grid_mapping_name"}
        parts = ", ".join(f"{k}={v}" for k, v in self.attrs if k not in skip)
        return f"{self.name} ({parts})"


def _plain(v):
    a = np.asarray(v)
    if a.ndim == 0:
        return a.item()
    return tuple(a.tolist())


def _first_line(exc) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__


def find_mapping(raw, where: str = "the file"):
    """The CF grid mapping a dataset's variables point to (None for longitude-latitude)."""
    refs = []
    for var in raw.data_vars.values():
        ref = var.attrs.get("grid_mapping")
        if ref:
            refs.append(str(ref).split(":")[0].strip())  # CF extended form "crs: x y"
    refs += [n for n, v in raw.variables.items() if "grid_mapping_name" in v.attrs]
    for name in dict.fromkeys(refs):
        if name in raw.variables:
            attrs = dict(raw[name].attrs)
            if attrs.get("grid_mapping_name") == "latitude_longitude":
                continue
            return GridMapping.from_cf(attrs, where)
    return None


#: CF standard names saying how a wind component is oriented.
#: CF standard names of earth-relative and grid-relative winds, from the role catalogue.
EARTH_WINDS = tuple(n for k in ("u", "v") for n in role(k).standard_names if not n.startswith("grid_"))
GRID_WINDS = tuple(n for k in ("u", "v") for n in role(k).standard_names if n.startswith("grid_"))


def wind_frame(var, where: str = "the file") -> str:
    """'grid' or 'earth' for a wind component on a projected grid, as its attributes say.

    CF standard_name grid_eastward_wind / eastward_wind, or the GRIB flag uvRelativeToGrid
    kept by budget.grib; FieldsError when neither tells.
    """
    std = str(var.attrs.get("standard_name", ""))
    flag = var.attrs.get("GRIB_uvRelativeToGrid")
    if std.startswith("grid_") or flag == 1:
        return "grid"
    if std.startswith(("eastward_", "northward_")) or flag == 0:
        return "earth"
    raise FieldsError(
        f"The orientation of the wind '{var.name}' in {where} cannot be told on this projected grid (no "
        "standard_name eastward_wind or grid_eastward_wind); set that attribute to say whether the "
        "components are earth- or grid-relative."
    )


# -- winds --------------------------------------------------------------------------------
def earth_relative(ux, uy, alpha):
    """Earth-relative (eastward, northward) components of a vector given along the grid axes.

    alpha (radians) is the angle of the native x axis counter-clockwise from east; works on
    numpy or xarray arrays (broadcasting the angle over time and level).
    """
    c, s = np.cos(alpha), np.sin(alpha)
    return c * ux - s * uy, s * ux + c * uy


def grid_relative(u, v, alpha):
    """The inverse of earth_relative: components along the native x and y axes."""
    c, s = np.cos(alpha), np.sin(alpha)
    return c * u + s * v, -s * u + c * v


# -- the metric ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Metric:
    """Scale factors hx, hy (m on the sphere per native unit) and the x-axis angle alpha."""

    hx: np.ndarray
    hy: np.ndarray
    alpha: np.ndarray  # radians, angle of +x counter-clockwise from east
    skew: np.ndarray  # radians, departure of the axes from a right angle on the sphere


def _unit(lon, lat):
    lam, phi = np.radians(lon), np.radians(lat)
    return np.stack([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], axis=-1)


def _tangent(mapping, x, y, dx, dy, radius):
    """Length (m) and direction (east, north) of the step ±(dx, dy) around (x, y)."""
    lo1, la1 = mapping.to_lonlat(x + dx, y + dy)
    lo0, la0 = mapping.to_lonlat(x - dx, y - dy)
    lon, lat = mapping.to_lonlat(x, y)
    d = _unit(lo1, la1) - _unit(lo0, la0)
    lam, phi = np.radians(lon), np.radians(lat)
    east = np.stack([-np.sin(lam), np.cos(lam), np.zeros_like(lam)], axis=-1)
    north = np.stack([-np.sin(phi) * np.cos(lam), -np.sin(phi) * np.sin(lam), np.cos(phi)], axis=-1)
    de, dn = (d * east).sum(-1), (d * north).sum(-1)
    return radius * np.linalg.norm(d, axis=-1), np.arctan2(dn, de)


def metric(mapping: GridMapping, x, y, step: float, radius: float = EARTH_RADIUS) -> Metric:
    """Map factors and axis angle at native points (x, y), measured on the sphere of `radius`.

    Centred finite differences of the mapping with a step of `_METRIC_STEP` grid spacings:
    the chord between the two images, over the native distance, is hx (or hy) to a relative
    error of order step².
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    h = _METRIC_STEP * step
    lx, ax = _tangent(mapping, x, y, h, 0.0, radius)
    ly, ay = _tangent(mapping, x, y, 0.0, h, radius)
    skew = np.angle(np.exp(1j * (ay - ax - np.pi / 2)))
    return Metric(lx / (2 * h), ly / (2 * h), ax, skew)


# -- the grid -----------------------------------------------------------------------------
def _edges(c: np.ndarray) -> np.ndarray:
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def axis_bilinear(xs: np.ndarray, ys: np.ndarray, px: np.ndarray, py: np.ndarray):
    """Flat indices (n, 4) and weights (n, 4) for bilinear interpolation on ascending axes.

    Points beyond the outermost centres (inside the outer half cell) take the edge value.
    """
    nx, ny = xs.size, ys.size

    def locate(c, p, n):
        pc = np.clip(p, c[0], c[-1])
        k0 = np.clip(np.searchsorted(c, pc, side="right") - 1, 0, max(n - 2, 0))
        k1 = np.minimum(k0 + 1, n - 1)
        span = c[k1] - c[k0]
        t = np.where(span > 0, (pc - c[k0]) / np.where(span > 0, span, 1.0), 0.0)
        return k0, k1, t

    i0, i1, tx = locate(xs, px, nx)
    j0, j1, ty = locate(ys, py, ny)
    idx = np.stack([j0 * nx + i0, j0 * nx + i1, j1 * nx + i0, j1 * nx + i1], axis=1)
    w = np.stack([(1 - ty) * (1 - tx), (1 - ty) * tx, ty * (1 - tx), ty * tx], axis=1)
    return idx, w


@dataclass(frozen=True, eq=False)
class ProjectedGrid:
    """A grid regular in the native plane of a CF grid mapping (cell centres x, y ascending)."""

    mapping: GridMapping
    x: np.ndarray
    y: np.ndarray
    periodic: bool = False
    #: relative shortfall of the summed cover against the region's exact area that still
    #: counts as fully covered (cells are measured through densified edges)
    cover_rtol: float = 1e-5
    #: names of the row and column dimensions in the canonical fields
    dims = ("y", "x")

    @classmethod
    def from_latlon(cls, mapping: GridMapping, lon2d, lat2d, where: str = "the file"):
        """The grid whose 2-D longitudes/latitudes these are, or FieldsError when irregular.

        Returns (grid, flip_y, flip_x): flip tells which axes the data must be reversed along
        so that x and y ascend.
        """
        lon2d, lat2d = np.asarray(lon2d, float), np.asarray(lat2d, float)
        xx, yy = mapping.to_native(lon2d, lat2d)
        if mapping.name == "rotated_latitude_longitude":
            xx = np.degrees(np.unwrap(np.radians(xx), axis=1))
        x, y = xx.mean(axis=0), yy.mean(axis=1)
        dx = np.median(np.abs(np.diff(x))) if x.size > 1 else 1.0
        dy = np.median(np.abs(np.diff(y))) if y.size > 1 else 1.0
        bad = max(np.abs(xx - x[None, :]).max() / dx, np.abs(yy - y[:, None]).max() / dy)
        if not np.isfinite(bad) or bad > 1e-2:
            raise FieldsError(
                f"The 2-D latitude and longitude in {where} do not form a regular grid of the "
                f"{mapping.describe()} mapping (off by {bad:.2g} cells); check the grid_mapping attributes."
            )
        flip_x, flip_y = x.size > 1 and x[1] < x[0], y.size > 1 and y[1] < y[0]
        grid = cls(mapping, x[::-1] if flip_x else x, y[::-1] if flip_y else y)
        return grid, bool(flip_y), bool(flip_x)

    @property
    def shape(self):
        return (self.y.size, self.x.size)

    @cached_property
    def _lonlat(self):
        X, Y = np.meshgrid(self.x, self.y)
        return self.mapping.to_lonlat(X, Y)

    @property
    def lon(self) -> np.ndarray:
        """2-D longitudes (degrees) of the cell centres, (ny, nx)."""
        return self._lonlat[0]

    @property
    def lat(self) -> np.ndarray:
        return self._lonlat[1]

    @property
    def dx(self) -> float:
        return float(np.median(np.diff(self.x))) if self.x.size > 1 else 1.0

    @property
    def dy(self) -> float:
        return float(np.median(np.diff(self.y))) if self.y.size > 1 else 1.0

    def metric(self, radius: float = EARTH_RADIUS) -> Metric:
        cache = self.__dict__.setdefault("_metric_cache", {})
        if radius not in cache:
            X, Y = np.meshgrid(self.x, self.y)
            cache[radius] = metric(self.mapping, X, Y, min(self.dx, self.dy), radius)
        return cache[radius]

    def spacing_deg(self) -> float:
        """The smaller grid spacing as an angle on the sphere (degrees), median over the grid."""
        m = self.metric()
        return float(min(np.median(m.hx) * self.dx, np.median(m.hy) * self.dy) / EARTH_RADIUS * 180.0 / np.pi)

    def cell_area_near(self, lat: float, radius: float = EARTH_RADIUS) -> float:
        m = self.metric(radius)
        return float(np.median(m.hx * m.hy) * self.dx * self.dy)

    def extent_text(self) -> str:
        lon = (self.lon + 180.0) % 360.0 - 180.0
        return (
            f"a {self.mapping.name} grid over longitudes {lon.min():.4g}..{lon.max():.4g}, "
            f"latitudes {self.lat.min():.4g}..{self.lat.max():.4g}"
        )

    def point_text(self, flat: int) -> str:
        j, i = divmod(int(flat), self.shape[1])
        return f"({self.lon[j, i]:.2f}°E, {self.lat[j, i]:.2f}°N)"

    # -- the stencil's questions ----------------------------------------------------------
    def to_native(self, lon, lat):
        x, y = self.mapping.to_native(lon, lat)
        if self.mapping.name == "rotated_latitude_longitude":
            # rotated longitudes into the grid's own frame (whole turns)
            mid = 0.5 * (self.x[0] + self.x[-1])
            x = mid + np.mod(x - mid + 180.0, 360.0) - 180.0
        return x, y

    def bilinear(self, lon, lat):
        """Indices (n, 4) and weights (n, 4) of bilinear interpolation in native coordinates."""
        from .errors import RegionError

        px, py = self.to_native(lon, lat)
        xe, ye = _edges(self.x), _edges(self.y)
        tol = 1e-9 * max(abs(self.dx), abs(self.dy))
        bad = ~np.isfinite(px) | (px < xe[0] - tol) | (px > xe[-1] + tol) | (py < ye[0] - tol) | (py > ye[-1] + tol)
        if np.any(bad):
            k = int(np.flatnonzero(bad)[0])
            lon_k = (float(np.ravel(lon)[k]) + 180.0) % 360.0 - 180.0
            raise RegionError(
                f"The region's boundary leaves the data grid near ({lon_k:.2f}°E, {float(np.ravel(lat)[k]):.2f}°N); "
                f"the fields cover {self.extent_text()}: draw the region inside them or supply wider fields."
            )
        return axis_bilinear(self.x, self.y, px, py)

    def cover(self, geom, radius: float = EARTH_RADIUS):
        """Flat cell indices and spherical areas (m²) of each cell's part inside geom (lon-lat).

        The region (edges straight in lon-lat, densified to an eighth of the grid spacing) is
        carried into the native plane and cut by the cell rectangles there; each cell or
        piece is then carried back, its edges densified likewise, and measured on the sphere.
        """
        import shapely

        step = self.spacing_deg() / 8.0
        native = shapely.transform(shapely.segmentize(geom, step), lambda c: np.column_stack(self.to_native(c[:, 0], c[:, 1])))
        minx, miny, maxx, maxy = native.bounds
        xe, ye = _edges(self.x), _edges(self.y)
        cols = np.flatnonzero((xe[1:] > minx) & (xe[:-1] < maxx))
        rows = np.flatnonzero((ye[1:] > miny) & (ye[:-1] < maxy))
        if rows.size == 0 or cols.size == 0:
            return np.zeros(0, int), np.zeros(0)
        J, I = (a.ravel() for a in np.meshgrid(rows, cols, indexing="ij"))
        boxes = shapely.box(xe[I], ye[J], xe[I + 1], ye[J + 1])
        shapely.prepare(native)
        inter = shapely.intersects(native, boxes)
        full = shapely.contains_properly(native, boxes)
        part = inter & ~full
        area = np.zeros(boxes.size)
        area[full] = self._box_areas(J[full], I[full], radius)
        nstep = min(abs(self.dx), abs(self.dy)) / 8.0
        area[part] = [self._native_area(g, nstep, radius) for g in shapely.intersection(boxes[part], native)]
        keep = area > 0
        return J[keep] * self.shape[1] + I[keep], area[keep]

    def _box_areas(self, J, I, radius, n: int = 8):
        """Spherical areas of whole cells: each side cut into n native-straight pieces."""
        from .sphere import ring_areas

        xe, ye = _edges(self.x), _edges(self.y)
        t = np.arange(n) / n
        ux = np.concatenate([t, np.ones(n), 1 - t, np.zeros(n)])  # counter-clockwise
        uy = np.concatenate([np.zeros(n), t, np.ones(n), 1 - t])
        x0, x1, y0, y1 = xe[I], xe[I + 1], ye[J], ye[J + 1]
        X = x0[:, None] + ux[None, :] * (x1 - x0)[:, None]
        Y = y0[:, None] + uy[None, :] * (y1 - y0)[:, None]
        lon, lat = self.mapping.to_lonlat(X, Y)
        lon = np.degrees(np.unwrap(np.radians(lon), axis=1))
        return np.abs(ring_areas(lon, lat, radius))

    def _native_area(self, geom, step, radius) -> float:
        import shapely

        from .sphere import ring_area

        total = 0.0
        for poly in shapely.get_parts(shapely.segmentize(geom, step)):
            if poly.is_empty or poly.geom_type != "Polygon":
                continue
            for k, ring in enumerate([poly.exterior, *poly.interiors]):
                x, y = np.asarray(ring.coords).T
                lon, lat = self.mapping.to_lonlat(x, y)
                lon = np.degrees(np.unwrap(np.radians(lon)))
                a = abs(ring_area(lon, lat, radius))
                total += a if k == 0 else -a
        return total

    def divergence(self, cells, radius: float = EARTH_RADIUS):
        """Sparse Du, Dv (len(cells) × ncell): ∇·Q = Du·Qu + Dv·Qv from earth-relative Qu, Qv.

        Centred differences in native coordinates of the orthogonal-coordinate divergence
        1/(hx hy) [∂(hy Qx)/∂x + ∂(hx Qy)/∂y] (any text on vector calculus in curvilinear
        coordinates), Qx, Qy the grid-relative components; one-sided at the grid's edges.
        """
        import scipy.sparse as sp

        ny, nx = self.shape
        m = self.metric(radius)
        hx, hy, c, s = m.hx.ravel(), m.hy.ravel(), np.cos(m.alpha).ravel(), np.sin(m.alpha).ravel()
        cells = np.asarray(cells, int)
        j, i = np.divmod(cells, nx)
        ie, iw = np.minimum(i + 1, nx - 1), np.maximum(i - 1, 0)
        jn, js = np.minimum(j + 1, ny - 1), np.maximum(j - 1, 0)
        fac = 1.0 / (hx[cells] * hy[cells])
        with np.errstate(divide="ignore", invalid="ignore"):
            cx = np.where(ie > iw, fac / (self.x[ie] - self.x[iw]), 0.0)
            cy = np.where(jn > js, fac / (self.y[jn] - self.y[js]), 0.0)
        e, w = j * nx + ie, j * nx + iw
        n, so = jn * nx + i, js * nx + i
        cols = np.concatenate([e, w, n, so])
        rows = np.tile(np.arange(cells.size), 4)
        # ∂(hy Qx)/∂x with Qx = c Qu + s Qv;  ∂(hx Qy)/∂y with Qy = −s Qu + c Qv
        wu = np.concatenate([cx * hy[e] * c[e], -cx * hy[w] * c[w], -cy * hx[n] * s[n], cy * hx[so] * s[so]])
        wv = np.concatenate([cx * hy[e] * s[e], -cx * hy[w] * s[w], cy * hx[n] * c[n], -cy * hx[so] * c[so]])
        shape = (cells.size, ny * nx)
        return sp.coo_matrix((wu, (rows, cols)), shape=shape).tocsr(), sp.coo_matrix((wv, (rows, cols)), shape=shape).tocsr()
