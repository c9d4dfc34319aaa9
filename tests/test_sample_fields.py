"""The invented demo event: shipped files, physical plausibility, and its analytic budget.

The analytic truth (sample_fields.truth) is checked against routes outside it: the divergence
theorem with independently differenced fields, spherical-harmonic potentials and a stream
function (CHECKS.md), pyproj's geodesic polygon area, MetPy's precipitable water and scipy's
adaptive quadrature; and the sample's dry air closes but for the vapour it loses (P − E).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from scipy.integrate import quad

import sample_fields
from budget.constants import EARTH_RADIUS, STANDARD_GRAVITY
from budget.errors import RequestError
from sample_fields import generate as G
from sample_fields import truth as T

A = EARTH_RADIUS
LABEL = "Invented demonstration scenario for Fluxfence"


@pytest.fixture(scope="module")
def shipped():
    paths = sample_fields.ensure_sample()
    with xr.open_dataset(paths.levels) as lev, xr.open_dataset(paths.column) as col:
        yield paths, lev.load(), col.load()


@pytest.fixture(scope="module")
def basin_budget():
    return T.exact_budget(T.BASIN_LON, T.BASIN_LAT)


# --------------------------------------------------------------------------------------
# Shipped files
# --------------------------------------------------------------------------------------


def test_bundled_files_are_the_package_files_and_small(shipped):
    paths, _, _ = shipped
    for p in paths.all():
        assert p.parent == G.PACKAGE_DIR
    total = sum(p.stat().st_size for p in paths.all())
    assert total < 4 * 1024**2  # the brief's size budget for shipping in git


def test_regenerating_gives_the_shipped_values(shipped, tmp_path):
    _, lev, col = shipped
    fresh = sample_fields.write_sample(tmp_path)
    with xr.open_dataset(fresh.levels) as a, xr.open_dataset(fresh.column) as b:
        for name in ("ua", "va", "hus", "ps"):
            np.testing.assert_allclose(a[name].values, lev[name].values, rtol=1e-6, atol=0)
            assert a[name].attrs == lev[name].attrs
        for name in ("ivt_east", "ivt_north", "pwat"):
            np.testing.assert_allclose(b[name].values, col[name].values, rtol=1e-6, atol=0)
        np.testing.assert_array_equal(a.time.values, lev.time.values)
    assert json.loads(fresh.basin.read_text()) == json.loads(shipped[0].basin.read_text())


def test_files_carry_the_invented_label(shipped):
    paths, lev, col = shipped
    for ds in (lev, col):
        assert LABEL in ds.attrs["title"] and "not real weather" in ds.attrs["title"]
        assert LABEL in ds.attrs["comment"]
    feature = json.loads(paths.basin.read_text())["features"][0]
    assert feature["properties"]["name"] == "Invented basin (demo)"
    assert "not real weather" in feature["properties"]["comment"]


def test_cf_metadata(shipped):
    # CF conventions 1.8, sections 4.1-4.4 (coordinate standard names and units)
    _, lev, col = shipped
    for ds in (lev, col):
        assert ds.lat.attrs["standard_name"] == "latitude" and ds.lat.attrs["units"] == "degrees_north"
        assert ds.lon.attrs["standard_name"] == "longitude" and ds.lon.attrs["units"] == "degrees_east"
        assert ds.time.size == 21
        assert ds.time.values[0] == np.datetime64("2025-01-15T00:00")
        assert np.all(np.diff(ds.time.values) == np.timedelta64(6, "h"))
        assert ds.sizes["lon"] == 61 and ds.sizes["lat"] == 41
    assert lev.plev.attrs == {**lev.plev.attrs, "standard_name": "air_pressure", "units": "hPa", "positive": "down"}
    names = {"ua": ("eastward_wind", "m s-1"), "va": ("northward_wind", "m s-1"),
             "hus": ("specific_humidity", "kg kg-1"), "ps": ("surface_air_pressure", "Pa")}
    for v, (sn, u) in names.items():
        assert (lev[v].attrs["standard_name"], lev[v].attrs["units"]) == (sn, u)
    names = {"ivt_east": ("eastward_atmosphere_water_vapor_transport_across_unit_distance", "kg m-1 s-1"),
             "ivt_north": ("northward_atmosphere_water_vapor_transport_across_unit_distance", "kg m-1 s-1"),
             "pwat": ("atmosphere_mass_content_of_water_vapor", "kg m-2")}
    for v, (sn, u) in names.items():
        assert (col[v].attrs["standard_name"], col[v].attrs["units"]) == (sn, u)
        assert col[v].dtype == np.float32


def test_column_file_holds_the_analytic_columns(shipped):
    _, _, col = shipped
    t = T.seconds_since_start(col.time.values)[:, None, None]
    lo, la = np.meshgrid(col.lon.values, col.lat.values)
    fu, fv = T.vapour_flux(lo[None], la[None], t)
    np.testing.assert_allclose(col.ivt_east.values, fu, rtol=2e-5, atol=1e-4)
    np.testing.assert_allclose(col.ivt_north.values, fv, rtol=2e-5, atol=1e-4)
    np.testing.assert_allclose(col.pwat.values, T.precipitable_water(lo[None], la[None], t), rtol=2e-5)


def test_below_ground_values_are_extrapolated_not_missing(shipped):
    _, lev, _ = shipped
    p = lev.plev.values[None, :, None, None] * 100.0
    below = p > lev.ps.values[:, None, :, :]
    assert below.any(axis=1).mean() > 0.02  # the ridge puts levels under ground in part of the grid
    assert np.isfinite(lev.hus.values[below]).all()
    # constant extension: each below-ground value equals the value at the surface
    lo = lev.lon.values[None, None, None, :]
    la = lev.lat.values[None, None, :, None]
    t = T.seconds_since_start(lev.time.values)[:, None, None, None]
    ps = lev.ps.values[:, None, :, :].astype(float)
    q_surface = np.broadcast_to(T.specific_humidity(lo, la, ps, t), below.shape)
    np.testing.assert_allclose(lev.hus.values[below], q_surface[below], rtol=1e-4)


# --------------------------------------------------------------------------------------
# Physical plausibility
# --------------------------------------------------------------------------------------


def test_plume_reaches_atmospheric_river_strength(shipped):
    _, _, col = shipped
    ivt = np.hypot(col.ivt_east, col.ivt_north)
    # Rutz, Steenburgh and Ralph 2014 (Mon. Wea. Rev. 142): AR conditions where IVT >= 250 kg m-1 s-1
    assert float(ivt.max()) >= 250.0
    # the brief asks for a peak of order 500-900; below the extreme-AR range
    # (> 1700 kg m-1 s-1, Dettinger, Ralph and Rutz 2018, J. Hydrometeor. 19)
    assert 500.0 <= float(ivt.max()) <= 900.0 < 1700.0


def test_whole_plume_transport_is_of_the_published_order():
    # Guan, Waliser and Ralph 2018 (J. Hydrometeor. 19): a whole AR carries about 5e8 kg s-1;
    # accept a factor of three either way (individual rivers vary widely, common practice).
    lat = np.linspace(35.0, 55.0, 4001)
    lon = np.zeros_like(lat)
    fu, fv = T.vapour_flux(lon, lat, 2.6 * 86400.0)
    core = np.hypot(fu, fv) >= 250.0
    transport = np.trapezoid(np.where(core, fu, 0.0), np.deg2rad(lat)) * A
    assert 5e8 / 3 <= transport <= 5e8 * 3


def test_humidity_and_precipitable_water_are_plausible(shipped):
    _, lev, col = shipped
    # common practice, no source: specific humidity above 0.04 kg/kg means g/kg mislabelled
    assert float(lev.hus.max()) < 0.04
    assert float(lev.hus.max()) <= 0.015 and float(lev.hus.min()) > 0.0
    # precipitable water: positive and below ~70 kg m-2 (humid tropical columns, from memory)
    assert 0.0 < float(col.pwat.min()) and float(col.pwat.max()) < 70.0
    # domain-and-event mean within a factor of three of the global mean 24.9 kg m-2
    # (Trenberth and Smith 2005, J. Climate 18: 1.27e16 kg of vapour over the globe)
    assert 24.9 / 3 <= float(col.pwat.mean()) <= 24.9 * 3


def test_default_mass_correction_barely_changes_the_basin_budget(shipped):
    # With mass-consistent winds the barotropic correction (Trenberth 1991; budget.mass) only
    # returns the vapour-loss part of the dry-air residual: c ≈ A (P − E) / ∮μ dl, so it changes
    # P − E by about (P − E) W/μ (W ≈ 12-27 kg m-2 against μ ≈ 8000 kg m-2: ~0.3 %), plus the
    # layer-sum and interpolation part (≤ 0.6 hPa/day of dry air, ≈ 0.02 mm/day of vapour).
    import budget

    paths, _, _ = shipped
    ds = budget.compute(budget.open_fields(paths.levels), budget.load_region(path=paths.basin))
    pme = ds["p_minus_e"].values
    effect = ds["mass_correction_convergence"].values
    assert ds.attrs["mass_correction"] == "applied"
    assert np.all(np.abs(effect) < 0.01 * np.abs(pme))
    assert np.all(np.abs(ds["mass_correction_speed"].values) < 0.02)  # m s-1
    assert np.all(np.abs(ds["dry_air_residual_pressure"].values) * 864.0 < 5.0)  # Pa s-1 -> hPa/day


def test_surface_pressure_exercises_partial_layers(shipped):
    _, lev, _ = shipped
    ps_hpa = lev.ps.values / 100.0
    assert 780.0 <= ps_hpa.min() <= 820.0  # the ridge: ps falls to about 800 hPa
    assert 1000.0 <= ps_hpa.max() <= 1030.0  # lowlands near sea level (standard atmosphere 1013.25 hPa)
    # surface pressures fall between levels, not only on them
    assert np.mean(np.isin(np.round(ps_hpa), lev.plev.values)) < 0.05


def test_basin_outline(shipped):
    from pyproj import Geod
    from shapely.geometry import shape

    paths, lev, _ = shipped
    gj = json.loads(paths.basin.read_text())
    geom = shape(gj["features"][0]["geometry"])
    ring = np.asarray(gj["features"][0]["geometry"]["coordinates"][0])
    assert 10 <= len(ring) - 1 <= 20
    assert geom.is_valid
    assert geom.exterior.is_ccw  # RFC 7946 section 3.1.6: exterior rings counter-clockwise
    lon0, lat0, lon1, lat1 = geom.bounds
    assert lev.lon.min() + 2 < lon0 and lon1 < lev.lon.max() - 2
    assert lev.lat.min() + 2 < lat0 and lat1 < lev.lat.max() - 2
    area, _ = Geod(a=A, f=0).polygon_area_perimeter(*_densify(ring[:-1, 0], ring[:-1, 1]))
    assert 1e11 <= area <= 3e11  # 1-3 x 10^5 km2


# --------------------------------------------------------------------------------------
# The analytic truth against independent routes
# --------------------------------------------------------------------------------------


def _densify(lon, lat, n=400):
    s = np.arange(n) / n
    lon2, lat2 = np.roll(lon, -1), np.roll(lat, -1)
    return (np.concatenate([a + s * (b - a) for a, b in zip(lon, lon2)]),
            np.concatenate([a + s * (b - a) for a, b in zip(lat, lat2)]))


TRIANGLE = (np.array([-6.0, 3.0, -2.0]), np.array([37.0, 40.0, 49.0]))


@pytest.mark.parametrize("poly", [(T.BASIN_LON, T.BASIN_LAT), TRIANGLE], ids=["basin", "triangle"])
def test_polygon_area_matches_pyproj(poly):
    # pyproj Geod(a=R, f=0).polygon_area_perimeter joins vertices by geodesics, so densify the
    # lon-lat edges first (CHECKS.md); geodesic chords of 1/400 edge differ by < 1e-7 relative.
    from pyproj import Geod

    area, _ = Geod(a=A, f=0).polygon_area_perimeter(*_densify(*poly))
    assert T.polygon_area(*poly) == pytest.approx(area, rel=1e-6)
    _, _, w = T.area_nodes(*poly)
    assert w.sum() == pytest.approx(T.polygon_area(*poly), rel=1e-12)


def test_box_area_and_area_rule_against_closed_forms():
    # 10 x 10 degree box 0-10 N: 1.2302e12 m2 (CHECKS.md, R^2 dλ (sin φ2 − sin φ1))
    box = (np.array([0.0, 10.0, 10.0, 0.0]), np.array([0.0, 0.0, 10.0, 10.0]))
    assert T.polygon_area(*box) == pytest.approx(1.2302e12, rel=1e-4)
    # ∬ sin φ dA over a box 20-50 N, 5 E-25 E = a² Δλ (sin² φ2 − sin² φ1) / 2 (closed form)
    lon, lat = np.array([5.0, 25.0, 25.0, 5.0]), np.array([20.0, 20.0, 50.0, 50.0])
    nl, nphi, w = T.area_nodes(lon, lat)
    exact = A**2 * np.deg2rad(20.0) * (np.sin(np.deg2rad(50.0)) ** 2 - np.sin(np.deg2rad(20.0)) ** 2) / 2
    assert (np.sin(np.deg2rad(nphi)) * w).sum() == pytest.approx(exact, rel=1e-12)


def _fd_divergence(lon, lat, t, h=1e-4):
    """∇·Q by centred differences of the analytic fields (step h degrees), CHECKS.md formula."""
    hr = np.deg2rad(h)
    dqu = (T.qu(lon + h, lat, t) - T.qu(lon - h, lat, t)) / (2 * hr)
    cp, cm = np.cos(np.deg2rad(lat + h)), np.cos(np.deg2rad(lat - h))
    dqv = (T.qv(lon, lat + h, t) * cp - T.qv(lon, lat - h, t) * cm) / (2 * hr)
    return (dqu + dqv) / (A * np.cos(np.deg2rad(lat)))


@pytest.mark.parametrize("poly", [(T.BASIN_LON, T.BASIN_LAT), TRIANGLE], ids=["basin", "triangle"])
def test_divergence_theorem_closes_the_exact_import(poly):
    # Gauss's divergence theorem on the sphere (CHECKS.md): ∮ Q·n dl = ∬ ∇·Q dA
    times = np.array([0.0, 1.7, 2.6, 3.4, 5.0]) * 86400.0
    budget = T.exact_budget(*poly, times)
    nl, nphi, w = T.area_nodes(*poly)
    for k, t in enumerate(times):
        area_integral = (_fd_divergence(nl, nphi, t) * w).sum()
        assert -area_integral == pytest.approx(float(budget.vapour_import[k]), rel=1e-6)
        # the complex-step divergence of the module agrees with the centred difference too
        assert (T.divergence(nl, nphi, t) * w).sum() == pytest.approx(area_integral, rel=1e-6)


def test_rotational_flux_contributes_nothing_around_a_closed_ring():
    # Q = k × ∇ψ: Qu = −(1/a) ∂ψ/∂φ, Qv = (1/(a cos φ)) ∂ψ/∂λ (CHECKS.md); its boundary integral
    # vanishes for any closed ring.  ψ is a Gaussian blob near the basin, derivatives by hand.
    c = 5e12  # kg s-1, so |Q| is of order 100s of kg m-1 s-1

    def psi_parts(lon, lat):
        x, y = np.deg2rad(lon - 7.0), np.deg2rad(lat - 45.0)
        g = c * np.exp(-(x**2 + y**2) / (2 * np.deg2rad(3.0) ** 2))
        s2 = np.deg2rad(3.0) ** 2
        return g, -x / s2 * g, -y / s2 * g  # ψ, ∂ψ/∂λ, ∂ψ/∂φ

    def rot_u(lon, lat, t):
        return -psi_parts(lon, lat)[2] / A

    def rot_v(lon, lat, t):
        return psi_parts(lon, lat)[1] / (A * np.cos(np.deg2rad(lat)))

    out = T.boundary_outflow(T.BASIN_LON, T.BASIN_LAT, np.array([0.0]), rot_u, rot_v)[0]
    bl, bp, dl, dp = T.boundary_nodes(T.BASIN_LON, T.BASIN_LAT)
    gross = A * np.abs(rot_u(bl, bp, 0) * dp - rot_v(bl, bp, 0) * np.cos(np.deg2rad(bp)) * dl).sum()
    assert gross > 1e8
    assert abs(out) < 1e-10 * gross


def test_potential_flux_matches_spherical_harmonic_laplacian():
    # Q = ∇χ with χ = C sin φ cos φ cos λ (∝ Y_2^1): ∇²χ = −l(l+1) χ / a² = −6 χ / a² (CHECKS.md),
    # so the outward flux is ∬ −6 χ / a² dA; Qu = (1/(a cos φ)) ∂χ/∂λ, Qv = (1/a) ∂χ/∂φ.
    C = 1e9

    def chi(lon, lat):
        lam, phi = np.deg2rad(lon), np.deg2rad(lat)
        return C * np.sin(phi) * np.cos(phi) * np.cos(lam)

    def pu(lon, lat, t):
        lam, phi = np.deg2rad(lon), np.deg2rad(lat)
        return -C * np.sin(phi) * np.sin(lam) / A

    def pv(lon, lat, t):
        lam, phi = np.deg2rad(lon), np.deg2rad(lat)
        return C * np.cos(2 * phi) * np.cos(lam) / A

    for poly in ((T.BASIN_LON, T.BASIN_LAT), TRIANGLE):
        out = T.boundary_outflow(*poly, np.array([0.0]), pu, pv)[0]
        nl, nphi, w = T.area_nodes(*poly)
        assert out == pytest.approx((-6.0 * chi(nl, nphi) / A**2 * w).sum(), rel=1e-9)


def test_budget_identities_and_tendency(basin_budget):
    b = basin_budget
    area = b.attrs["region_area_m2"]
    np.testing.assert_allclose(b.vapour_convergence, b.vapour_import / area, rtol=1e-14)
    np.testing.assert_allclose(b.p_minus_e, b.vapour_convergence - b.pw_tendency, rtol=1e-12, atol=1e-18)
    for name in b.data_vars:
        assert b[name].attrs["units"]
    # the complex-step tendency against a centred difference of the area mean, 5 s either side
    # (truncation error ~ h²/6 · d³W/dt³, ~1e-9 relative for a one-day time scale)
    t = T.seconds_since_start(b.time.values)
    up = T.exact_budget(T.BASIN_LON, T.BASIN_LAT, t + 5.0).precipitable_water.values
    dn = T.exact_budget(T.BASIN_LON, T.BASIN_LAT, t - 5.0).precipitable_water.values
    np.testing.assert_allclose(b.pw_tendency, (up - dn) / 10.0, rtol=0, atol=1e-7 * float(abs(b.pw_tendency).max()))


def test_basin_budget_is_an_event(basin_budget):
    b = basin_budget
    pme = b.p_minus_e.values * 86400.0  # mm/day of liquid water (CHECKS.md conversion)
    w = b.precipitable_water.values
    # common practice, no source: a strong orographic AR event gives basin-mean P−E of tens of
    # mm/day at its peak and a few mm/day before and after; W rises and falls again
    assert 20.0 < pme.max() < 40.0 and 0.0 < pme.min() < 10.0
    assert pme[0] < 0.25 * pme.max() and pme[-1] < 0.25 * pme.max()
    assert w.max() > 1.5 * w[0] and w[-1] < 0.6 * w.max()
    assert 1e11 <= b.attrs["region_area_m2"] <= 3e11


def _air_flux_u(lon, lat, t):
    return T.air_mass_flux(lon, lat, t)[0]


def _air_flux_v(lon, lat, t):
    return T.air_mass_flux(lon, lat, t)[1]


def test_air_mass_flux_is_the_curl_of_its_stream_function():
    # M = M_bg(φ) x̂ + k × ∇ψ with Mu = −(1/a) ∂ψ/∂φ, Mv = (1/(a cos φ)) ∂ψ/∂λ (CHECKS.md).  The
    # module writes the derivatives of ψ by hand; here they come from complex steps of ψ itself
    # (scipy.special.erf of a complex argument; Squire and Trefethen 1998).
    lon, lat = np.meshgrid(np.linspace(-10, 20, 61), np.linspace(35, 55, 41))
    h = 1e-8
    for t in (0.0, 1.9 * 86400, 2.6 * 86400, 4.5 * 86400):
        dpsi_dlam = np.imag(T.jet_stream_function(lon + 1j * h, lat, t)) / np.deg2rad(h)
        dpsi_dphi = np.imag(T.jet_stream_function(lon, lat + 1j * h, t)) / np.deg2rad(h)
        mu, mv = T.air_mass_flux(lon, lat, t)
        background = T.air_mass_flux(np.full_like(lat, -1e3), lat, t)[0]  # far from the jet
        np.testing.assert_allclose(mu - background, -dpsi_dphi / A, rtol=0, atol=1e-9 * np.abs(mu).max())
        np.testing.assert_allclose(mv, dpsi_dlam / (A * np.cos(np.deg2rad(lat))), rtol=0, atol=1e-9 * np.abs(mu).max())
        # the far field is the zonal background alone (latitude only)
        assert np.all(np.abs(T.air_mass_flux(np.full_like(lat, -1e3), lat, t)[1]) < 1e-6)


@pytest.mark.parametrize("poly", [(T.BASIN_LON, T.BASIN_LAT), TRIANGLE], ids=["basin", "triangle"])
def test_air_mass_flux_is_non_divergent(poly):
    # a rotational flux contributes nothing to a closed boundary integral (CHECKS.md), and its
    # divergence by centred differences of the fields vanishes to the truncation error
    times = np.array([0.0, 2.0, 2.6, 3.4]) * 86400.0
    out = T.boundary_outflow(*poly, times, _air_flux_u, _air_flux_v)
    bl, bp, dl, dp = T.boundary_nodes(*poly)
    for k, t in enumerate(times):
        mu, mv = T.air_mass_flux(bl, bp, t)
        gross = A * np.abs(mu * dp - mv * np.cos(np.deg2rad(bp)) * dl).sum()
        assert gross > 1e10  # kg s-1: a strong flow crosses the boundary
        assert abs(out[k]) < 1e-10 * gross
    nl, nphi, _ = T.area_nodes(*poly)
    hr = np.deg2rad(1e-4)
    t = 2.6 * 86400.0
    dmu = (_air_flux_u(nl + 1e-4, nphi, t) - _air_flux_u(nl - 1e-4, nphi, t)) / (2 * hr)
    cp, cm = np.cos(np.deg2rad(nphi + 1e-4)), np.cos(np.deg2rad(nphi - 1e-4))
    dmv = (_air_flux_v(nl, nphi + 1e-4, t) * cp - _air_flux_v(nl, nphi - 1e-4, t) * cm) / (2 * hr)
    assert np.max(np.abs(dmu + dmv)) < 1e-6 * np.max(np.abs(dmu))


def test_winds_integrate_to_the_air_mass_flux():
    # (1/g) ∫ V dp from the top level to ps by scipy.integrate.quad equals M, the flux the
    # winds were scaled to (the closed form of S(ps) in truth.wind_ref)
    g = STANDARD_GRAVITY
    for lon, lat, t in [(0.0, 40.0, 2.6 * 86400), (11.5, 46.0, 86400.0), (8.0, 46.0, 2.4 * 86400)]:
        ps = float(T.surface_pressure(lon, lat, t))
        mu, mv = T.air_mass_flux(lon, lat, t)
        fu = quad(lambda p: T.wind(lon, lat, p, t)[0], T.P_TOP, ps, epsabs=0, epsrel=1e-12)[0] / g
        fv = quad(lambda p: T.wind(lon, lat, p, t)[1], T.P_TOP, ps, epsabs=0, epsrel=1e-12)[0] / g
        assert fu == pytest.approx(float(mu), rel=1e-10)
        assert fv == pytest.approx(float(mv), rel=1e-10, abs=1e-6 * abs(float(mu)))


def test_surface_pressure_is_steady():
    lon, lat = np.meshgrid(T.LON, T.LAT)
    p0 = T.surface_pressure(lon, lat, 0.0)
    for t in (1.0, 2.6 * 86400, 5 * 86400):
        np.testing.assert_array_equal(T.surface_pressure(lon, lat, t), p0)


def test_continuum_dry_air_budget_closes_but_for_the_vapour_removed(basin_budget):
    # Dry air has no sources (budget.mass; Trenberth 1991): dμ/dt + ∇·F = 0 for consistent
    # fields.  Here μ = (ps − p_top)/g − W (CHECKS.md) with ps steady and F = M − Q with ∇·M = 0,
    # so the residual dμ/dt − (dry-air convergence) is −dW/dt − ∇·Q = P − E exactly: the vapour
    # that leaves as P − E is the only mass the sample's air does not keep.
    t = T.seconds_since_start(basin_budget.time.values)

    def fu(lon, lat, tt):
        return _air_flux_u(lon, lat, tt) - T.qu(lon, lat, tt)

    def fv(lon, lat, tt):
        return _air_flux_v(lon, lat, tt) - T.qv(lon, lat, tt)

    area = T.polygon_area(T.BASIN_LON, T.BASIN_LAT)
    dry_convergence = -T.boundary_outflow(T.BASIN_LON, T.BASIN_LAT, t, fu, fv) / area
    dmu_dt = -basin_budget.pw_tendency.values  # ps steady
    residual = dmu_dt - dry_convergence
    np.testing.assert_allclose(residual, basin_budget.p_minus_e.values, rtol=1e-6)
    # as a surface-pressure tendency (× g × 86400 / 100): a few hPa/day at most, the order of
    # real reanalyses' regional dry-air residuals (Trenberth 1991, from memory)
    hpa_day = residual * STANDARD_GRAVITY * 864.0
    assert 0.0 < hpa_day.min() and hpa_day.max() < 4.0


def test_winds_are_plausible():
    # common practice, no source (from memory): low-level jets of 10-25 m/s, upper-level winds
    # of 20-70 m/s in a winter jet; nothing faster than 80 m/s here
    lon, lat = np.meshgrid(T.LON, T.LAT)
    fastest = 0.0
    for t in T.seconds_since_start(T.file_times()):
        u, v = T.wind(lon, lat, T.P0, t)
        fastest = max(fastest, float(np.hypot(u, v).max()))
    assert 10.0 < fastest < 25.0  # at 1000 hPa
    u, v = T.wind(lon, lat, T.P_TOP, 2.6 * 86400)
    assert 20.0 < float(np.hypot(u, v).max()) < 80.0


def test_closed_form_columns_match_adaptive_quadrature():
    # scipy.integrate.quad of the pressure profiles from the top level to ps, against the
    # closed forms of W and Q (definitions in CHECKS.md: (1/g)∫q dp, (1/g)∫qV dp)
    for lon, lat, t in [(0.0, 40.0, 2.6 * 86400), (11.5, 46.0, 86400.0), (-8.0, 54.0, 0.0)]:
        ps = float(T.surface_pressure(lon, lat, t))
        w = quad(lambda p: T.specific_humidity(lon, lat, p, t), T.P_TOP, ps, epsabs=0, epsrel=1e-12)[0]
        fu = quad(lambda p: T.specific_humidity(lon, lat, p, t) * T.wind(lon, lat, p, t)[0], T.P_TOP, ps, epsabs=0, epsrel=1e-12)[0]
        fv = quad(lambda p: T.specific_humidity(lon, lat, p, t) * T.wind(lon, lat, p, t)[1], T.P_TOP, ps, epsabs=0, epsrel=1e-12)[0]
        g = STANDARD_GRAVITY
        assert float(T.precipitable_water(lon, lat, t)) == pytest.approx(w / g, rel=1e-10)
        qu, qv = T.vapour_flux(lon, lat, t)
        assert float(qu) == pytest.approx(fu / g, rel=1e-10)
        assert float(qv) == pytest.approx(fv / g, rel=1e-10)


def test_closed_form_w_matches_metpy_precipitable_water():
    # metpy.calc.precipitable_water integrates the mixing ratio by the trapezoid rule from
    # bottom= to top= and divides by g ρw (CHECKS.md).  Give it dewpoints whose mixing ratio
    # equals our q, on 400 levels, so it integrates exactly our profile; bottom=ps tests the
    # partial column.  Tolerance 3e-3: in MetPy 1.7 dewpoint() inverts Bolton's (1980) vapour
    # pressure formula while saturation_vapor_pressure() uses Ambaum's (2020), so the round
    # trip q -> dewpoint -> mixing ratio comes back low by 0.07-0.2 %; MetPy's ρw = 999.975
    # kg m-3 (metpy.constants) adds 2.5e-5.
    from metpy.calc import dewpoint, precipitable_water, vapor_pressure
    from metpy.units import units

    for lon, lat, t in [(0.0, 40.0, 2.6 * 86400), (11.5, 46.0, 86400.0)]:
        ps = float(T.surface_pressure(lon, lat, t))
        p = np.linspace(ps, T.P_TOP, 400)
        r = T.specific_humidity(lon, lat, p, t)
        td = dewpoint(vapor_pressure(p * units.Pa, r * units("kg/kg")))
        pw = precipitable_water(p * units.Pa, td, bottom=ps * units.Pa, top=T.P_TOP * units.Pa)
        assert pw.to("mm").magnitude == pytest.approx(float(T.precipitable_water(lon, lat, t)), rel=3e-3)


def test_layer_sum_error_estimates_are_small_and_signed(basin_budget):
    # the beta-factor layer sum (Boer 1982) on the file's 11 levels against the continuum
    est = T.discretisation_estimates(T.BASIN_LON, T.BASIN_LAT)
    assert 0.0 < min(est["vertical_area_mean_w_signed"]) and est["vertical_area_mean_w"] < 0.01
    assert est["vertical_import"] < 0.01
    assert est["horizontal_import"] < 0.03
    assert est["vertical_pointwise_w_max"] < 0.08
    assert est["tendency"] < 0.06


# --------------------------------------------------------------------------------------
# ensure_sample / write_sample behaviour
# --------------------------------------------------------------------------------------


def test_write_sample_never_overwrites(tmp_path):
    paths = sample_fields.write_sample(tmp_path)
    before = paths.levels.stat().st_mtime_ns
    with pytest.raises(RequestError, match="already exists"):
        sample_fields.write_sample(tmp_path)
    assert paths.levels.stat().st_mtime_ns == before
    target = tmp_path / "a_file"
    target.write_text("keep me")
    with pytest.raises(RequestError, match="is a file, not a directory"):
        sample_fields.write_sample(target)
    assert target.read_text() == "keep me"


def test_ensure_sample_writes_once_when_not_bundled(tmp_path, monkeypatch):
    monkeypatch.setattr(G, "PACKAGE_DIR", tmp_path / "stripped-install")
    first = sample_fields.ensure_sample(tmp_path / "cache")
    assert first.levels.parent == tmp_path / "cache" and first.levels.is_file()
    stamp = first.column.stat().st_mtime_ns
    again = sample_fields.ensure_sample(tmp_path / "cache")
    assert again == first and again.column.stat().st_mtime_ns == stamp
    # the default location follows XDG_CACHE_HOME
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    default = sample_fields.ensure_sample()
    assert default.basin == tmp_path / "xdg" / "fluxfence" / "sample" / "basin.geojson"


def test_exact_budget_accepts_seconds_and_either_orientation(basin_budget):
    # the same budget from float seconds and from a clockwise, closed copy of the ring
    t = T.seconds_since_start(basin_budget.time.values)
    lon = np.append(T.BASIN_LON[::-1], T.BASIN_LON[-1])
    lat = np.append(T.BASIN_LAT[::-1], T.BASIN_LAT[-1])
    other = T.exact_budget(lon, lat, t)
    np.testing.assert_array_equal(other.time.values, basin_budget.time.values)
    for name in basin_budget.data_vars:
        np.testing.assert_allclose(other[name], basin_budget[name], rtol=1e-10, atol=1e-16)
    assert other.attrs["region_area_m2"] == pytest.approx(basin_budget.attrs["region_area_m2"], rel=1e-12)


def test_edge_import_inflow_outflow_against_adaptive_quadrature():
    # each edge of the basin integrated on its own by scipy.integrate.quad (adaptive
    # Gauss-Kronrod) of the outward flux a (Qu dφ/ds − Qv cos φ dλ/ds) (CHECKS.md) over s in [0, 1]
    t = 2.6 * 86400.0
    b = T.exact_budget(T.BASIN_LON, T.BASIN_LAT, np.array([t]))
    lon, lat = T.BASIN_LON, T.BASIN_LAT
    total_in = total_out = 0.0
    for i in range(lon.size):
        j = (i + 1) % lon.size
        dl, dp = np.deg2rad(lon[j] - lon[i]), np.deg2rad(lat[j] - lat[i])

        def out(s):
            x, y = lon[i] + s * (lon[j] - lon[i]), lat[i] + s * (lat[j] - lat[i])
            fu, fv = T.vapour_flux(x, y, t)
            return A * (fu * dp - fv * np.cos(np.deg2rad(y)) * dl)

        net = quad(out, 0.0, 1.0, epsabs=0, epsrel=1e-12, limit=200)[0]
        assert -net == pytest.approx(float(b.edge_import[0, i]), rel=1e-9, abs=1e-3)
        total_in += quad(lambda s: max(-out(s), 0.0), 0.0, 1.0, epsabs=1e-3, epsrel=1e-12, limit=400)[0]
        total_out += quad(lambda s: max(out(s), 0.0), 0.0, 1.0, epsabs=1e-3, epsrel=1e-12, limit=400)[0]
    assert float(b.inflow[0]) == pytest.approx(total_in, rel=1e-6)
    assert float(b.outflow[0]) == pytest.approx(total_out, rel=1e-6)
    assert float(b.inflow[0] - b.outflow[0]) == pytest.approx(float(b.vapour_import[0]), rel=1e-9)


def test_counting_extrapolated_values_as_air_would_show(shipped):
    # Trenberth, Hurrell and Solomon 1995 (J. Climate 8) name below-ground extrapolated values
    # as a mass-budget error source.  On the ridge the file's below-ground humidity, if counted
    # as air down to 1000 hPa, inflates W far beyond the layer-sum error; the beta-factor sum
    # (Boer 1982, budget.vertical) that stops at ps stays within its discretisation error.
    from budget.vertical import PressureLevels, column_integral

    _, lev, col = shipped
    order = np.argsort(lev.plev.values)
    p = lev.plev.values[order] * 100.0
    q = lev.hus.values[:, order].astype(float)
    ps = lev.ps.values.astype(float)
    dp = np.moveaxis(PressureLevels(p).thickness(ps), 0, 1)  # (time, level, lat, lon)
    w_layer = column_integral(q, dp, level_axis=1)
    dp_all = np.moveaxis(PressureLevels(p).thickness(np.full_like(ps, 1e5)), 0, 1)
    w_naive = column_integral(q, dp_all, level_axis=1)
    exact = col.pwat.values
    ridge = ps < 85000.0
    assert ridge.any()
    assert np.max(np.abs(w_layer / exact - 1)) < 0.07  # discretisation_estimates: 6.8 % worst
    assert np.min(w_naive[ridge] / exact[ridge] - 1) > 0.15
