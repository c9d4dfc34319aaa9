"""Geometry on the sphere for polygons whose edges are straight in longitude-latitude.

GeoJSON (RFC 7946) joins polygon vertices by straight lines in longitude-latitude, so an edge
is the curve φ(λ) linear in λ (or a meridian when Δλ = 0), not a great circle.  For such
rings the spherical area has a closed form:

    A = ∬ R² cos φ dλ dφ = −R² ∮ sin φ dλ           (Green's theorem in the (λ, φ) plane)

and on one edge, with φ linear in λ,

    ∫ sin φ dλ = Δλ (cos φ₁ − cos φ₂) / Δφ = Δλ · sin φ_mid · sinc(Δφ / 2),

which is also exact (and numerically stable) as Δφ → 0.  Areas are signed, positive for a
counter-clockwise ring (interior on the left), in m² for the given radius.

All angles in and out are degrees; lengths and areas are metres and square metres.
"""

from __future__ import annotations

import numpy as np

from .constants import EARTH_RADIUS

__all__ = [
    "ring_area",
    "ring_areas",
    "cell_areas",
    "arc_lengths",
    "great_circle_points",
    "great_circle_lat_at_lon",
    "densify",
]

# Gauss-Legendre nodes and weights on [0, 1] for arc lengths of long lon-lat pieces.
_GL_X, _GL_W = np.polynomial.legendre.leggauss(8)
_GL_X = 0.5 * (_GL_X + 1.0)
_GL_W = 0.5 * _GL_W


def _as_ring(lon_deg, lat_deg):
    lon = np.asarray(lon_deg, dtype=float).ravel()
    lat = np.asarray(lat_deg, dtype=float).ravel()
    if lon.shape != lat.shape:
        raise ValueError(f"lon and lat differ in length ({lon.size} and {lat.size})")
    if lon.size > 1 and lon[0] == lon[-1] and lat[0] == lat[-1]:
        lon, lat = lon[:-1], lat[:-1]  # closed ring: drop the repeated vertex
    return lon, lat


def _edge_sin_integral(lat1, lat2, dlon):
    """∫ sin φ dλ along lon-lat-straight edges, all in radians (vectorised)."""
    dphi = lat2 - lat1
    mid = 0.5 * (lat1 + lat2)
    # np.sinc(x) = sin(πx)/(πx), so sin(Δφ/2)/(Δφ/2) = np.sinc(Δφ/(2π))
    return dlon * np.sin(mid) * np.sinc(dphi / (2.0 * np.pi))


def ring_area(lon_deg, lat_deg, radius: float = EARTH_RADIUS) -> float:
    """Signed area (m², counter-clockwise positive) of a ring with lon-lat-straight edges.

    The ring may be given closed (last vertex repeating the first) or not.  Longitudes are
    taken as given: an edge spans exactly the longitude difference of its two vertices, so a
    ring across the antimeridian must use a continuous longitude frame (e.g. 170 … 190), and
    an edge from −180 to 180 along a parallel is a full circle of latitude.
    """
    lon, lat = _as_ring(lon_deg, lat_deg)
    if lon.size < 3:
        return 0.0
    return float(ring_areas(lon[None, :], lat[None, :], radius)[0])


def ring_areas(lon_deg, lat_deg, radius: float = EARTH_RADIUS) -> np.ndarray:
    """Signed areas (m²) of many rings at once: arrays (k, n), n vertices each, not closed.

    The same closed form as ring_area, row by row.
    """
    lam = np.radians(np.asarray(lon_deg, dtype=float))
    phi = np.radians(np.asarray(lat_deg, dtype=float))
    dlam = np.roll(lam, -1, axis=-1) - lam
    s = _edge_sin_integral(phi, np.roll(phi, -1, axis=-1), dlam)
    return -radius * radius * np.sum(s, axis=-1)


def cell_areas(lat_edges_deg, lon_edges_deg, radius: float = EARTH_RADIUS) -> np.ndarray:
    """Areas (m²) of lon-lat grid cells, shape (len(lat_edges) − 1, len(lon_edges) − 1).

    A cell between latitudes φ₁, φ₂ and longitudes λ₁, λ₂ has area R² Δλ (sin φ₂ − sin φ₁)
    exactly.  Edges may be ascending or descending; areas are positive.  Latitude edges are
    clipped to ±90°.
    """
    lat_e = np.clip(np.asarray(lat_edges_deg, dtype=float), -90.0, 90.0)
    lon_e = np.asarray(lon_edges_deg, dtype=float)
    dsin = np.abs(np.diff(np.sin(np.radians(lat_e))))
    dlam = np.abs(np.diff(np.radians(lon_e)))
    return radius * radius * np.outer(dsin, dlam)


def arc_lengths(lon_deg, lat_deg, radius: float = EARTH_RADIUS, closed: bool = False) -> np.ndarray:
    """Lengths (m) of the lon-lat-straight pieces of a polyline (closed=True adds last → first).

    The length of a piece is ∫ R √(φ'² + cos²φ λ'²) dt over the straight lon-lat segment,
    evaluated with 8-point Gauss-Legendre quadrature.  For a short piece this is
    R √(Δφ² + cos²φ_mid Δλ²); meridians and parallels come out exact.
    """
    lon = np.asarray(lon_deg, dtype=float).ravel()
    lat = np.asarray(lat_deg, dtype=float).ravel()
    if closed:
        lon = np.append(lon, lon[:1])
        lat = np.append(lat, lat[:1])
    if lon.size < 2:
        return np.zeros(0)
    lam1, phi1 = np.radians(lon[:-1]), np.radians(lat[:-1])
    dlam = np.radians(np.diff(lon))
    dphi = np.radians(np.diff(lat))
    phi_t = phi1[:, None] + dphi[:, None] * _GL_X[None, :]
    speed = np.sqrt(dphi[:, None] ** 2 + (np.cos(phi_t) * dlam[:, None]) ** 2)
    return radius * (speed @ _GL_W)


def to_xyz(lon_deg, lat_deg):
    """Unit vectors (…, 3) on the sphere of longitudes and latitudes in degrees."""
    lam = np.radians(np.asarray(lon_deg, dtype=float))
    phi = np.radians(np.asarray(lat_deg, dtype=float))
    return np.stack([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], axis=-1)


def great_circle_points(lon1, lat1, lon2, lat2, n: int):
    """n points (endpoints included) along the shorter great-circle arc from 1 to 2.

    Spherical linear interpolation (slerp).  Longitudes come back continuous, starting at lon1
    (consecutive points differ by less than 180°), so an arc across the antimeridian runs past
    ±180; the last longitude equals lon2 up to a multiple of 360.  Raises ValueError for
    antipodal endpoints, where the arc is not defined.
    """
    if n < 2:
        raise ValueError("great_circle_points needs n >= 2")
    p1 = to_xyz(lon1, lat1)
    p2 = to_xyz(lon2, lat2)
    omega = np.arctan2(np.linalg.norm(np.cross(p1, p2)), np.dot(p1, p2))
    t = np.linspace(0.0, 1.0, n)
    if omega < 1e-15:
        lon = np.full(n, float(lon1))
        lat = np.full(n, float(lat1))
        lon[-1], lat[-1] = lon2, lat2
        return _continuous(lon), lat
    if abs(omega - np.pi) < 1e-12:
        raise ValueError(
            f"({lon1}, {lat1}) and ({lon2}, {lat2}) are antipodal; the great circle is not defined"
        )
    w1 = np.sin((1.0 - t) * omega) / np.sin(omega)
    w2 = np.sin(t * omega) / np.sin(omega)
    p = w1[:, None] * p1 + w2[:, None] * p2
    lat = np.degrees(np.arctan2(p[:, 2], np.hypot(p[:, 0], p[:, 1])))
    lon = np.degrees(np.arctan2(p[:, 1], p[:, 0]))
    # exact endpoints; at a pole the longitude is undefined, keep the given one
    lon[0], lat[0] = lon1, lat1
    lat[-1] = lat2
    lon[-1] = lon2
    polar = np.abs(lat) >= 90.0 - 1e-9
    if polar.any():
        # a pole has no longitude of its own: carry the neighbour's longitude
        for i in np.flatnonzero(polar):
            if 0 < i < n - 1:
                lon[i] = lon[i - 1]
    return _continuous(lon, start=float(lon1)), lat


def _continuous(lon, start=None):
    lon = np.asarray(lon, dtype=float).copy()
    if start is not None:
        lon[0] = start
    d = np.diff(lon)
    d = (d + 180.0) % 360.0 - 180.0
    lon[1:] = lon[0] + np.cumsum(d)
    return lon


def great_circle_lat_at_lon(lon1, lat1, lon2, lat2, lon0) -> float:
    """Latitude (degrees) where the great circle through points 1 and 2 meets meridian lon0."""
    n = np.cross(to_xyz(lon1, lat1), to_xyz(lon2, lat2))
    lam0 = np.radians(lon0)
    num = -(n[0] * np.cos(lam0) + n[1] * np.sin(lam0))
    sign = 1.0 if n[2] >= 0 else -1.0
    return float(np.degrees(np.arctan2(sign * num, abs(n[2]))))


def densify(lon_deg, lat_deg, max_step_deg: float, great_circle: bool = False, closed: bool = True):
    """Insert points so that no piece is longer than max_step_deg (in lon-lat degrees).

    Returns (lon, lat, edge) where edge[k] is the index of the original edge (vertex i → i+1)
    that piece k (point k → k+1) belongs to.  With closed=True the closing edge is included
    and the returned polyline ends with the first vertex again.  With great_circle=True the
    inserted points lie on the great circle through the edge's endpoints, otherwise on the
    straight lon-lat line; longitudes are continuous either way.
    """
    lon = np.asarray(lon_deg, dtype=float).ravel()
    lat = np.asarray(lat_deg, dtype=float).ravel()
    if closed:
        lon = np.append(lon, lon[:1])
        lat = np.append(lat, lat[:1])
    out_lon, out_lat, edge = [lon[:1]], [lat[:1]], []
    for i in range(lon.size - 1):
        dl = lon[i + 1] - lon[i]
        dp = lat[i + 1] - lat[i]
        m = max(1, int(np.ceil(np.hypot(dl, dp) / max_step_deg)))
        if great_circle and m > 1:
            glon, glat = great_circle_points(lon[i], lat[i], lon[i + 1], lat[i + 1], m + 1)
            glon = glon - glon[0] + lon[i]
            glon[-1] = lon[i + 1]
            glat[-1] = lat[i + 1]
            seg_lon, seg_lat = glon[1:], glat[1:]
        else:
            t = np.arange(1, m + 1) / m
            seg_lon, seg_lat = lon[i] + t * dl, lat[i] + t * dp
            seg_lon[-1], seg_lat[-1] = lon[i + 1], lat[i + 1]
        out_lon.append(seg_lon)
        out_lat.append(seg_lat)
        edge.append(np.full(m, i))
    edge_arr = np.concatenate(edge) if edge else np.zeros(0, dtype=int)
    return np.concatenate(out_lon), np.concatenate(out_lat), edge_arr
