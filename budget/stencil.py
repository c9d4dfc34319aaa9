"""Compile a region laid over a grid into sparse weights: the *stencil*.

Every budget term over a region is a linear functional of gridded fields, so the region is
compiled once per grid into sparse matrices acting on the vector of the grid cells it touches:

* boundary weights: the outward flux through each short piece of the boundary,
  a·(Qu dφ − Qv ∫cosφ dλ) (CHECKS.md, divergence theorem on the sphere), with Qu, Qv
  interpolated bilinearly from the four surrounding grid points to the piece's midpoint;
* cover weights: the spherical area of each grid cell's part inside the polygon (fractional
  cover, exact for edges straight in longitude-latitude);
* area-divergence weights: the cover-weighted sum of the centred-difference divergence
  (1/(a cosφ)) [∂Qu/∂λ + ∂(Qv cosφ)/∂φ] of the covered cells (one-sided at a regional grid's
  edges, wrapped round a global grid).

A time step then costs a sparse product over the few thousand touched cells.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import shapely

from . import sphere
from .constants import EARTH_RADIUS
from .errors import RegionError

#: Boundary pieces per grid spacing: short pieces keep the midpoint rule's error far below
#: the interpolation error (common practice, no source).
PIECES_PER_CELL = 4


@dataclass(frozen=True)
class Grid:
    """A regular (or at least monotonic) longitude-latitude grid of cell centres."""

    lat: np.ndarray  # degrees, ascending
    lon: np.ndarray  # degrees, ascending
    periodic: bool
    #: relative shortfall of the summed cover against the region's area still counted as full
    cover_rtol = 1e-6
    #: names of the row and column dimensions in the canonical fields
    dims = ("lat", "lon")

    @classmethod
    def from_fields(cls, fields):
        """The fields' grid: this class for longitude-latitude, or the fields' own
        `native_grid` (a budget.gridmap.ProjectedGrid) for rotated and projected grids."""
        native = getattr(fields, "native_grid", None)
        if native is not None:
            return native
        return cls(np.asarray(fields.lat, float), np.asarray(fields.lon, float), bool(fields.periodic))

    @property
    def shape(self):
        return (self.lat.size, self.lon.size)

    @property
    def dlat(self) -> float:
        return float(np.median(np.diff(self.lat))) if self.lat.size > 1 else 1.0

    @property
    def dlon(self) -> float:
        return float(np.median(np.diff(self.lon))) if self.lon.size > 1 else 1.0

    @property
    def lat_edges(self) -> np.ndarray:
        lat = self.lat
        mid = 0.5 * (lat[1:] + lat[:-1])
        e = np.concatenate([[lat[0] - (mid[0] - lat[0])], mid, [lat[-1] + (lat[-1] - mid[-1])]])
        return np.clip(e, -90.0, 90.0)

    @property
    def lon_edges(self) -> np.ndarray:
        lon = self.lon
        mid = 0.5 * (lon[1:] + lon[:-1])
        if self.periodic:
            first = 0.5 * (lon[0] + lon[-1] - 360.0)
            return np.concatenate([[first], mid, [first + 360.0]])
        return np.concatenate([[lon[0] - (mid[0] - lon[0])], mid, [lon[-1] + (lon[-1] - mid[-1])]])

    def spacing_deg(self) -> float:
        """The smaller grid spacing, degrees."""
        return min(abs(self.dlat), abs(self.dlon))

    def cell_area_near(self, lat: float, radius: float = EARTH_RADIUS) -> float:
        """The area (m²) of a typical cell at latitude lat."""
        jc = np.clip(np.searchsorted(self.lat, lat), 0, self.lat.size - 1)
        return radius**2 * np.radians(abs(self.dlon)) * np.radians(abs(self.dlat)) * np.cos(np.radians(self.lat[jc]))

    def point_text(self, flat: int) -> str:
        j, i = divmod(int(flat), self.shape[1])
        return f"({self.lon[i]:g}°E, {self.lat[j]:g}°N)"

    def cover(self, geom, radius: float = EARTH_RADIUS):
        """Flat cell indices and spherical areas (m²) of each cell's part inside geom."""
        return _cover_lonlat(geom, self, radius)

    def divergence(self, cells, radius: float = EARTH_RADIUS):
        return divergence_operator(self, cells, radius)

    def extent_text(self) -> str:
        le, ae = self.lon_edges, self.lat_edges
        if self.periodic:
            return f"global longitudes, latitudes {ae[0]:g}..{ae[-1]:g}"
        return f"longitudes {le[0]:g}..{le[-1]:g}, latitudes {ae[0]:g}..{ae[-1]:g}"

    # -- locating points -------------------------------------------------------------
    def to_grid_frame(self, lon: np.ndarray) -> np.ndarray:
        """Longitudes shifted by whole turns into the grid's own frame (NaN when outside)."""
        lon = np.asarray(lon, float)
        le = self.lon_edges
        if self.periodic:
            return le[0] + np.mod(lon - le[0], 360.0)
        out = np.full(lon.shape, np.nan)
        for k in (0.0, -360.0, 360.0, -720.0, 720.0):
            cand = lon + k
            ok = np.isnan(out) & (cand >= le[0] - 1e-9) & (cand <= le[-1] + 1e-9)
            out[ok] = cand[ok]
        return out

    def bilinear(self, lon: np.ndarray, lat: np.ndarray):
        """Indices (n, 4) of flat cells and weights (n, 4) for bilinear interpolation.

        Beyond the outermost cell centres (inside the outermost half cell) the value of the
        edge row or column is used. Points outside the grid's cells raise RegionError.
        """
        lat = np.asarray(lat, float)
        x = self.to_grid_frame(lon)
        ae = self.lat_edges
        bad = np.isnan(x) | (lat < ae[0] - 1e-9) | (lat > ae[-1] + 1e-9)
        if np.any(bad):
            k = int(np.flatnonzero(bad)[0])
            raise RegionError(
                f"The region's boundary leaves the data grid near ({_fmt_lon(lon[k])}, {lat[k]:.2f}°N); "
                f"the fields cover {self.extent_text()}: draw the region inside them or supply wider fields."
            )
        nlat, nlon = self.shape
        # latitude: clamp to the centre rows
        la = np.clip(lat, self.lat[0], self.lat[-1])
        j0 = np.clip(np.searchsorted(self.lat, la, side="right") - 1, 0, max(nlat - 2, 0))
        j1 = np.minimum(j0 + 1, nlat - 1)
        span = self.lat[j1] - self.lat[j0]
        ty = np.where(span > 0, (la - self.lat[j0]) / np.where(span > 0, span, 1.0), 0.0)
        # longitude
        if self.periodic:
            rel = np.mod(x - self.lon[0], 360.0)
            lon_rel = self.lon - self.lon[0]
            i0 = np.clip(np.searchsorted(lon_rel, rel, side="right") - 1, 0, nlon - 1)
            i1 = (i0 + 1) % nlon
            nxt = np.where(i0 == nlon - 1, 360.0, lon_rel[np.minimum(i0 + 1, nlon - 1)])
            tx = (rel - lon_rel[i0]) / (nxt - lon_rel[i0])
        else:
            xo = np.clip(x, self.lon[0], self.lon[-1])
            i0 = np.clip(np.searchsorted(self.lon, xo, side="right") - 1, 0, max(nlon - 2, 0))
            i1 = np.minimum(i0 + 1, nlon - 1)
            span = self.lon[i1] - self.lon[i0]
            tx = np.where(span > 0, (xo - self.lon[i0]) / np.where(span > 0, span, 1.0), 0.0)
        idx = np.stack([j0 * nlon + i0, j0 * nlon + i1, j1 * nlon + i0, j1 * nlon + i1], axis=1)
        w = np.stack([(1 - ty) * (1 - tx), (1 - ty) * tx, ty * (1 - tx), ty * tx], axis=1)
        return idx, w


def _fmt_lon(lon: float) -> str:
    lon = (float(lon) + 180.0) % 360.0 - 180.0
    return f"{abs(lon):.2f}°{'E' if lon >= 0 else 'W'}"


# -- the boundary ----------------------------------------------------------------------
@dataclass
class Boundary:
    """Short pieces of every ring of a region, in order, with their geometry."""

    lon0: np.ndarray
    lat0: np.ndarray
    lon1: np.ndarray
    lat1: np.ndarray
    edge: np.ndarray  # edge index of each piece
    edge_names: list
    vertex_piece: np.ndarray  # index of the first piece of each edge

    @property
    def mid_lon(self):
        return 0.5 * (self.lon0 + self.lon1)

    @property
    def mid_lat(self):
        return 0.5 * (self.lat0 + self.lat1)

    def normal_factors(self, radius: float = EARTH_RADIUS):
        """(fu, fv) such that the outward flux of a piece is fu·Qu + fv·Qv (kg s-1)."""
        p0, p1 = np.radians(self.lat0), np.radians(self.lat1)
        dlam = np.radians(self.lon1 - self.lon0)
        dphi = p1 - p0
        # exact ∫ cos φ dλ along a piece straight in lon-lat
        with np.errstate(invalid="ignore", divide="ignore"):
            c_lam = np.where(np.abs(dphi) > 1e-12, (np.sin(p1) - np.sin(p0)) * dlam / dphi, np.cos(p0) * dlam)
        return radius * dphi, -radius * c_lam

    def lengths(self, radius: float = EARTH_RADIUS):
        pm = np.radians(self.mid_lat)
        dlam = np.radians(self.lon1 - self.lon0)
        dphi = np.radians(self.lat1 - self.lat0)
        return radius * np.sqrt(dphi**2 + (np.cos(pm) * dlam) ** 2)


def boundary_of(region, step_deg: float) -> Boundary:
    """Every ring of the region cut into pieces no longer than step_deg (sphere.densify)."""
    lon0, lat0, lon1, lat1, edge, names, first = [], [], [], [], [], [], []
    for part in region.parts:
        for ring in [part.exterior, *part.holes]:
            lon, lat, e = sphere.densify(ring.lon, ring.lat, step_deg, great_circle=region.great_circle, closed=True)
            offset = len(names)
            starts = np.searchsorted(e, np.arange(len(ring.edge_names)))
            first.extend(sum(len(x) for x in lon0) + starts)
            names.extend(ring.edge_names)
            lon0.append(lon[:-1]), lat0.append(lat[:-1]), lon1.append(lon[1:]), lat1.append(lat[1:])
            edge.append(e + offset)
    cat = np.concatenate
    return Boundary(cat(lon0), cat(lat0), cat(lon1), cat(lat1), cat(edge), names, np.asarray(first))


def cover_geometry(region, step_deg: float = 0.05):
    """The region as a shapely geometry in lon-lat; great-circle edges densified finely."""
    if not region.great_circle:
        return region.shapely()
    polys = []
    for part in region.parts:
        rings = []
        for ring in [part.exterior, *part.holes]:
            lon, lat, _ = sphere.densify(ring.lon, ring.lat, step_deg, great_circle=True, closed=True)
            rings.append(np.column_stack([lon, lat]))
        polys.append(shapely.Polygon(rings[0], rings[1:]))
    return polys[0] if len(polys) == 1 else shapely.MultiPolygon(polys)


# -- cover -----------------------------------------------------------------------------
def _geometry_area(geom, radius) -> float:
    total = 0.0
    for poly in shapely.get_parts(geom):
        if poly.is_empty or poly.geom_type != "Polygon":
            continue
        x, y = np.asarray(poly.exterior.coords).T
        total += abs(sphere.ring_area(x, y, radius))
        for hole in poly.interiors:
            hx, hy = np.asarray(hole.coords).T
            total -= abs(sphere.ring_area(hx, hy, radius))
    return total


def cover_weights(region, grid, radius: float = EARTH_RADIUS):
    """Flat cell indices and the spherical area (m2) of each cell's part inside the region."""
    return grid.cover(cover_geometry(region), radius)


def _cover_lonlat(geom, grid: Grid, radius: float):
    minx, miny, maxx, maxy = geom.bounds
    ae, le = grid.lat_edges, grid.lon_edges
    nlat, nlon = grid.shape
    rows = np.flatnonzero((ae[1:] > miny) & (ae[:-1] < maxy))
    cols, shifts = [], []
    for k in range(-2, 3):
        lo, hi = le[:-1] + 360.0 * k, le[1:] + 360.0 * k
        sel = np.flatnonzero((hi > minx) & (lo < maxx))
        cols.append(sel)
        shifts.append(np.full(sel.size, 360.0 * k))
    cols, shifts = np.concatenate(cols), np.concatenate(shifts)
    if rows.size == 0 or cols.size == 0:
        return np.zeros(0, int), np.zeros(0)
    J, I = np.meshgrid(rows, np.arange(cols.size), indexing="ij")
    J, I = J.ravel(), I.ravel()
    ci = cols[I]
    x0 = le[ci] + shifts[I]
    x1 = le[ci + 1] + shifts[I]
    y0, y1 = ae[J], ae[J + 1]
    boxes = shapely.box(x0, y0, x1, y1)
    shapely.prepare(geom)
    inter = shapely.intersects(geom, boxes)
    full = shapely.contains_properly(geom, boxes)
    part = inter & ~full
    area = np.zeros(boxes.size)
    lam = np.radians(x1 - x0)
    area[full] = radius**2 * lam[full] * (np.sin(np.radians(y1[full])) - np.sin(np.radians(y0[full])))
    pieces = shapely.intersection(boxes[part], geom)
    area[part] = [_geometry_area(g, radius) for g in pieces]
    keep = area > 0
    flat = J[keep] * nlon + ci[keep]
    # a cell can be reached twice only through different shifts of a periodic grid: add them
    uniq, inv = np.unique(flat, return_inverse=True)
    return uniq, np.bincount(inv, weights=area[keep])


# -- gridded divergence ----------------------------------------------------------------
def divergence_operator(grid: Grid, cells: np.ndarray, radius: float = EARTH_RADIUS):
    """Sparse (len(cells) × ncell) matrices Du, Dv: div = Du·Qu + Dv·Qv at the given cells.

    Centred differences on the sphere, (1/(a cosφ)) [∂Qu/∂λ + ∂(Qv cosφ)/∂φ]; one-sided at a
    regional grid's outer rows and columns, wrapped in longitude on a global grid. At a row on
    a pole (cosφ = 0) the adjacent row's divergence is used.
    """
    nlat, nlon = grid.shape
    cells = np.asarray(cells, int)
    j, i = np.divmod(cells, nlon)
    lat_r = np.radians(grid.lat)
    lon_r = np.radians(grid.lon)
    coslat = np.cos(lat_r)
    polar = np.abs(grid.lat) > 90.0 - 1e-9
    jj = j.copy()
    if polar.any() and nlat > 1:
        jj = np.where(polar[j] & (j == 0), 1, jj)
        jj = np.where(polar[j] & (j == nlat - 1), nlat - 2, jj)
    rows = np.arange(cells.size)
    # longitude neighbours
    if grid.periodic:
        ie, iw = (i + 1) % nlon, (i - 1) % nlon
        dl = np.mod(lon_r[ie] - lon_r[iw], 2 * np.pi)
        dl = np.where(dl == 0, 2 * np.pi, dl)
    else:
        ie, iw = np.minimum(i + 1, nlon - 1), np.maximum(i - 1, 0)
        dl = lon_r[ie] - lon_r[iw]
    jn, js = np.minimum(jj + 1, nlat - 1), np.maximum(jj - 1, 0)
    dphi = lat_r[jn] - lat_r[js]
    fac = 1.0 / (radius * coslat[jj])
    n = nlat * nlon
    with np.errstate(divide="ignore", invalid="ignore"):
        cu = np.where(dl > 0, fac / dl, 0.0)
        cv = np.where(dphi > 0, fac / dphi, 0.0)
    du = sp.coo_matrix(
        (np.concatenate([cu, -cu]), (np.concatenate([rows, rows]), np.concatenate([jj * nlon + ie, jj * nlon + iw]))),
        shape=(cells.size, n),
    ).tocsr()
    dv = sp.coo_matrix(
        (
            np.concatenate([cv * coslat[jn], -cv * coslat[js]]),
            (np.concatenate([rows, rows]), np.concatenate([jn * nlon + i, js * nlon + i])),
        ),
        shape=(cells.size, n),
    ).tocsr()
    return du, dv


# -- the stencil -----------------------------------------------------------------------
@dataclass
class TouchedCells:
    """Cells of a grid that a computation reads: sorted flat indices, and their rows and columns.

    The one home of the touched-cell view: a `Stencil` is one, and so is the union of several
    stencils' cells (budget.multi); reads (budget.blocks) need nothing more."""

    grid: Grid  # or a budget.gridmap.ProjectedGrid
    touched: np.ndarray  # flat indices into the grid, sorted

    @property
    def rows(self):
        return self.touched // self.grid.shape[1]

    @property
    def cols(self):
        return self.touched % self.grid.shape[1]


@dataclass
class Stencil(TouchedCells):
    """Sparse weights of one region on one grid, acting on the touched cells."""

    boundary: Boundary
    bu: sp.csr_matrix  # (npiece × ntouched): outward flux of each piece from Qu
    bv: sp.csr_matrix
    interp: sp.csr_matrix  # (npiece × ntouched): bilinear interpolation to piece midpoints
    cover: np.ndarray  # (ntouched,) m2 of each touched cell inside the region
    div_u: np.ndarray  # (ntouched,) cover-weighted divergence sum from Qu, divided by area
    div_v: np.ndarray
    edge_sum: sp.csr_matrix  # (nedge × npiece)
    area: float  # m2, the region's exact spherical area
    warnings: list = field(default_factory=list)

    @property
    def piece_length(self):
        return self.boundary.lengths()


def compile_stencil(region, grid, radius: float = EARTH_RADIUS) -> Stencil:
    """Compile region × grid into sparse weights; RegionError when the region leaves the grid.

    grid is a longitude-latitude `Grid` or a `budget.gridmap.ProjectedGrid`; both answer the
    same questions (bilinear, cover, divergence, spacing_deg, cell_area_near, extent_text).
    """
    step = grid.spacing_deg() / PIECES_PER_CELL
    bnd = boundary_of(region, step)
    idx, w = grid.bilinear(bnd.mid_lon, bnd.mid_lat)
    fu, fv = bnd.normal_factors(radius)

    cov_idx, cov_area = cover_weights(region, grid, radius)
    area = float(region.area_m2()) if hasattr(region, "area_m2") else float(cov_area.sum())
    warnings = []
    if area <= 0:
        raise RegionError("The region has no area; give at least three distinct vertices that enclose a surface.")
    covered = cov_area.sum()
    if covered < area * (1 - grid.cover_rtol):
        raise RegionError(
            f"{100 * (1 - covered / area):.1f}% of the region lies outside the data grid "
            f"({grid.extent_text()}); draw the region inside the fields or supply wider fields."
        )
    cell = grid.cell_area_near(float(np.average(np.asarray(bnd.mid_lat))), radius)
    if area < cell:
        warnings.append(
            f"The region ({area / 1e6:,.0f} km²) is smaller than about one grid cell ({cell / 1e6:,.0f} km²): "
            "its budget rests on a few interpolated values; treat it with caution or use finer fields."
        )

    du, dv = grid.divergence(cov_idx, radius)
    div_u_full = du.T @ cov_area / area
    div_v_full = dv.T @ cov_area / area
    div_cells = np.union1d(du.indices, dv.indices)

    touched = np.unique(np.concatenate([idx.ravel(), cov_idx, div_cells]))
    loc = np.searchsorted(touched, idx)  # local index of each bilinear neighbour
    npiece = bnd.lon0.size
    prow = np.repeat(np.arange(npiece), 4)
    interp = sp.coo_matrix((w.ravel(), (prow, loc.ravel())), shape=(npiece, touched.size)).tocsr()
    bu = sp.diags(fu) @ interp
    bv = sp.diags(fv) @ interp
    cover = np.zeros(touched.size)
    cover[np.searchsorted(touched, cov_idx)] = cov_area
    div_u = div_u_full[touched]
    div_v = div_v_full[touched]
    nedge = len(bnd.edge_names)
    edge_sum = sp.coo_matrix((np.ones(npiece), (bnd.edge, np.arange(npiece))), shape=(nedge, npiece)).tocsr()
    return Stencil(grid, touched, bnd, bu.tocsr(), bv.tocsr(), interp, cover, div_u, div_v, edge_sum, area, warnings)
