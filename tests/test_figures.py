"""Figure builders (app/figures.py) are pure functions: check traces, units, outlines, limits.

The inputs are small Datasets built here to the contracts in DEVELOPERS.md (budget.maps
column_snapshot and budget.ledger compute output), so no engine run is needed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app import figures, figures_map, figures_table


def _snapshot(lon0=-30.0, nlon=31, nlat=21):
    lon = lon0 + np.arange(nlon) * 1.0
    lat = 20.0 + np.arange(nlat) * 1.0
    glon, glat = np.meshgrid(lon, lat)
    u = 200.0 + 0 * glon
    v = 50.0 * np.sin(np.radians(glon))
    conv = 1e-4 * (glon - glon.mean()) + 3e-5  # kg m-2 s-1, asymmetric about zero
    dims = ("lat", "lon")
    return xr.Dataset(
        {
            "ivt_u": (dims, u, {"units": "kg m-1 s-1"}),
            "ivt_v": (dims, v, {"units": "kg m-1 s-1"}),
            "ivt": (dims, np.hypot(u, v), {"units": "kg m-1 s-1"}),
            "precipitable_water": (dims, 20 + glat, {"units": "kg m-2"}),
            "convergence": (dims, conv, {"units": "kg m-2 s-1"}),
        },
        coords={"lat": lat, "lon": lon},
    )


def _budget(nt=5, levels=True):
    times = pd.date_range("2031-03-01", periods=nt, freq="6h").values
    npiece, nlev = 40, 4
    dist = (np.arange(npiece) + 0.5) * 25_000.0
    area = 1.2302e12  # a 10° × 10° box at 0–10° N (CHECKS.md, derived)
    t = np.arange(nt, dtype=float)
    data = {
        "precipitable_water": ("time", 30 + t, {"units": "kg m-2"}),
        "pw_tendency": ("time", np.full(nt, 1 / 21600), {"units": "kg m-2 s-1"}),
        "boundary_convergence": ("time", 1e-4 * (1 + t), {"units": "kg m-2 s-1"}),
        "area_convergence": ("time", 1.1e-4 * (1 + t), {"units": "kg m-2 s-1"}),
        "vapour_convergence": ("time", 1e-4 * (1 + t), {"units": "kg m-2 s-1"}),
        "p_minus_e": ("time", 1e-4 * (1 + t) - 1 / 21600, {"units": "kg m-2 s-1"}),
        "boundary_import_density": (
            ("time", "piece"),
            np.outer(1 + t, np.sin(np.linspace(0, 2 * np.pi, npiece))) * 100,
            {"units": "kg m-1 s-1"},
        ),
    }
    coords = {
        "time": times,
        "edge": ["S", "E", "N", "W"],
        "piece_distance": ("piece", dist),
        "vertex_distance": ("vertex", np.array([0, 250e3, 500e3, 750e3])),
    }
    if levels:
        data["normal_flux_density"] = (
            ("time", "level", "piece"),
            np.random.default_rng(1).normal(size=(nt, nlev, npiece)) * 1e-3 + 5e-4,
            {"units": "kg m-1 s-1 Pa-1"},
        )
        coords["level"] = ("level", np.array([30000.0, 50000.0, 70000.0, 85000.0]))
    return xr.Dataset(data, coords=coords, attrs={"region_area_m2": area})


def _traces(fig, name):
    return [t for t in fig.data if t.name == name]


def test_map_ivt_has_units_arrows_coastline_and_active_outline():
    coast = [np.array([[-20.0, 30.0], [-10.0, 35.0], [0.0, 30.0]])]
    region = {"id": "r1", "name": "box", "rings": [([-20, -10, -10, -20], [25, 25, 35, 35])]}
    fig = figures_map.map_figure(_snapshot(), "ivt", coastline=coast, regions=[region],
                             active_region="r1", time_label="2031-03-01 00:00 UTC")
    heat = fig.data[0]
    assert heat.type == "heatmap"
    assert "kg m⁻¹ s⁻¹" in heat.colorbar.title.text
    assert heat.colorscale[0][1] != heat.colorscale[-1][1]
    assert _traces(fig, "transport arrows"), "IVT map draws arrows"
    coastline = _traces(fig, "coastline")[0]
    assert -20.0 in coastline.x and 30.0 in coastline.y
    outline = _traces(fig, "region: box")[0]
    # the outline is closed: first vertex repeated at the end
    assert outline.x[0] == outline.x[-1] == -20 and outline.y[0] == outline.y[-1] == 25
    assert fig.layout.xaxis.title.text == "longitude (°E)"
    assert fig.layout.yaxis.title.text == "latitude (°N)"
    assert "2031-03-01" in fig.layout.title.text


def test_map_convergence_colour_limits_are_zero_centred_and_in_mm_per_day():
    snap = _snapshot()
    fig = figures_map.map_figure(snap, "convergence")
    heat = fig.data[0]
    assert heat.zmid == 0
    assert heat.zmin == pytest.approx(-heat.zmax)
    assert heat.zmax > 0
    assert "mm/day" in heat.colorbar.title.text
    # kg m-2 s-1 × 86400 = mm/day (CHECKS.md, conversions)
    assert np.nanmax(np.asarray(heat.z)) == pytest.approx(float(snap["convergence"].max()) * 86400)


def test_map_pw_and_unknown_field():
    fig = figures_map.map_figure(_snapshot(), "pw", arrows=False)
    assert "kg m⁻²" in fig.data[0].colorbar.title.text
    assert not _traces(fig, "transport arrows")
    # transport arrows can lie over any field (e.g. over convergence)
    assert _traces(figures_map.map_figure(_snapshot(), "convergence"), "transport arrows")
    with pytest.raises(ValueError):
        figures_map.map_figure(_snapshot(), "wind")


def test_coastline_follows_a_0_to_360_grid():
    # a grid on 150..250 °E: a coastline point at −170 must appear at 190
    coast = [np.array([[-175.0, 40.0], [-170.0, 41.0]])]
    snap = _snapshot(lon0=150.0, nlon=101)
    fig = figures_map.map_figure(snap, "pw", coastline=coast)
    xs = [x for x in _traces(fig, "coastline")[0].x if x is not None]
    assert 190.0 in xs and -170.0 not in xs


def test_region_across_the_antimeridian_drawn_on_a_minus180_grid():
    region = {"id": "a", "name": "dateline", "rings": [([170, 190, 190, 170], [30, 30, 40, 40])]}
    snap = _snapshot(lon0=-180.0, nlon=360)
    fig = figures_map.map_figure(snap, "ivt", regions=[region], active_region="a")
    outlines = _traces(fig, "region: dateline")
    # the ring and its copy shifted by −360° (so the part east of 180 shows at the west edge)
    assert len(outlines) == 2
    assert sorted(min(o.x) for o in outlines) == [-190, 170]


def test_symmetric_limit_ignores_nan_and_single_spikes():
    values = np.r_[np.linspace(-1, 1, 1000), np.nan, 1e6]
    assert figures.symmetric_limit(values) < 10


def test_series_units_switch_and_time_marker():
    b = _budget()
    fig = figures.series_figure(b, "mm/day", time_index=2)
    pme = [t for t in fig.data if t.name == "P − E"][0]
    np.testing.assert_allclose(pme.y, b["p_minus_e"].values * 86400)
    assert "mm/day" in fig.layout.yaxis2.title.text
    assert fig.layout.yaxis.title.text == "W (kg m⁻²)"
    marker_x = {s.x0 for s in fig.layout.shapes if s.line.dash == "dash"}
    assert pd.Timestamp(b["time"].values[2]) in {pd.Timestamp(x) for x in marker_x}

    fig = figures.series_figure(b, "m3/s")
    pme = [t for t in fig.data if t.name == "P − E"][0]
    # m3/s = kg m-2 s-1 × area / 1000 kg m-3 (CHECKS.md, conversions)
    np.testing.assert_allclose(pme.y, b["p_minus_e"].values * 1.2302e12 / 1000)
    assert "m³/s" in fig.layout.yaxis2.title.text
    names = {t.name for t in fig.data}
    assert {"convergence (boundary)", "convergence (area)", "dW/dt", "W (area mean)"} <= names


def test_profile_marks_vertices_and_names_edges():
    b = _budget()
    fig = figures.profile_figure(b, 1)
    line = _traces(fig, "import density")[0]
    np.testing.assert_allclose(line.x, b["piece_distance"].values / 1000)
    np.testing.assert_allclose(line.y, b["boundary_import_density"].values[1])
    vlines = [s.x0 for s in fig.layout.shapes if s.type == "line" and s.x0 == s.x1]
    assert sorted(vlines) == [0, 250, 500, 750]
    assert {a.text for a in fig.layout.annotations} >= {"S", "E", "N"}
    assert "kg m⁻¹ s⁻¹" in fig.layout.yaxis.title.text
    assert "km" in fig.layout.xaxis.title.text


def test_curtain_zero_centred_in_hpa_and_column_inputs_explained():
    b = _budget()
    fig = figures.curtain_figure(b, 0)
    heat = fig.data[0]
    assert list(heat.y) == [300, 500, 700, 850]
    assert fig.layout.yaxis.autorange == "reversed"
    assert heat.zmin == pytest.approx(-heat.zmax)
    # per Pa -> per hPa is × 100
    np.testing.assert_allclose(np.asarray(heat.z), b["normal_flux_density"].values[0] * 100)
    assert "hPa⁻¹" in heat.colorbar.title.text

    fig = figures.curtain_figure(_budget(levels=False), 0)
    assert "levels" in fig.layout.annotations[0].text


def test_period_rows_mean_and_total_follow_one_rule():
    b = _budget(nt=5)
    rows = {r["term"]: r for r in figures_table.period_rows(b, "mm/day", 1, 3)}
    pme = rows["P − E"]
    rate = b["p_minus_e"].values[1:4] * 86400
    assert pme["mean_value"] == pytest.approx(rate.mean())
    # steps are 6 h = 0.25 day apart and each holds its value for 6 h (budget.periods'
    # rule): the total in mm, and mean × 0.75 day = total (identity)
    assert pme["total_value"] == pytest.approx(0.25 * (rate[0] + rate[1] + rate[2]))
    assert pme["mean_value"] * 0.75 == pytest.approx(pme["total_value"])
    assert pme["mean"].endswith("mm/day") and pme["total"].endswith("mm")
    w = rows["Precipitable water (mean; start → end)"]
    assert w["total_value"] == pytest.approx(2.0)

    rows = {r["term"]: r for r in figures_table.period_rows(b, "kg/s")}
    conv = rows["Convergence, boundary method"]
    seconds = 6 * 3600.0
    rate = b["boundary_convergence"].values * 1.2302e12
    assert conv["total_value"] == pytest.approx(np.sum(rate) * seconds)
    assert conv["total"].endswith(" kg")


def test_fixed_colour_range_is_used_and_convergence_stays_centred():
    snap = _snapshot()
    fig = figures_map.map_figure(snap, "ivt", color_range=(0.0, 500.0))
    assert fig.data[0].zmax == 500.0
    fig = figures_map.map_figure(snap, "convergence", color_range=(-3.0, 7.0))
    assert (fig.data[0].zmin, fig.data[0].zmax) == (-7.0, 7.0)
    lo, hi = figures_map.color_limits(figures_map.field_values(snap, "convergence"), "convergence")
    assert lo == -hi > -np.inf


def test_profile_numbers_vertices_of_a_many_sided_polygon():
    b = _budget().drop_vars("vertex_distance")
    n = 30
    b = b.assign_coords(vertex_distance=("vertex", np.linspace(0, 900e3, n)),
                        edge=("edge", [f"edge {i + 1}" for i in range(n)]))
    fig = figures.profile_figure(b, 0, name="Thirty sides", time_label="2031-03-01 00:00 UTC")
    labels = [a.text for a in fig.layout.annotations]
    # edges named as in the edge table and on the map ("edge 7" → "7"), every k-th of many
    assert labels[0] == "1" and len(labels) <= 16
    assert all(t.isdigit() for t in labels)
    # the panel names its region and the time shown
    assert "Thirty sides" in fig.layout.title.text and "2031-03-01 00:00" in fig.layout.title.text


def test_numbers_for_the_table_are_readable():
    # one format everywhere: 4 significant digits, thousands grouped, never an exponent
    # (a display choice: common practice, no source)
    assert figures_table.number(12570.4) == "12,570"
    assert figures_table.number(6.4412) == "6.441"
    assert figures_table.number(0.1402) == "0.1402"
    assert figures_table.number(5.302e9) == "5,302,000,000"
    assert figures_table.number(1.982e13) == "19,820,000,000,000"
    assert figures_table.number(-44_195_550) == "-44,200,000"
    assert figures_table.number(0.000123456) == "0.0001235"
    assert figures_table.number(2.0) == "2" and figures_table.number(0.0) == "0"
    assert figures_table.number(float("nan")) == "—"
    assert "e" not in figures_table.number(3.3e-9)


def test_edge_rows_mean_import_of_every_edge_in_boundary_order():
    b = _budget(nt=3)
    b["edge_import"] = (("time", "edge"), np.array([[1.0, -2.0, 3.0, 0.5]] * 3) * 1e7)
    rows = figures_table.edge_rows(b, "kg/s")
    assert [r["edge"] for r in rows] == ["S", "E", "N", "W"]
    assert rows[1]["mean_value"] == pytest.approx(-2e7) and rows[1]["direction"] == "out"
    assert rows[2]["mean"] == "30,000,000 kg/s"
    # in mm/day: the transport over the area × 86400 (CHECKS.md, conversions)
    mm = figures_table.edge_rows(b, "mm/day")
    assert mm[2]["mean_value"] == pytest.approx(3e7 / 1.2302e12 * 86400)
    # every edge is listed, however many (the table scrolls)
    n = 30
    many = b.drop_vars(["edge_import", "edge"]).assign_coords(
        edge=("edge", [f"edge {i + 1}" for i in range(n)]))
    many["edge_import"] = (("time", "edge"), np.ones((3, n)) * np.arange(n))
    rows = figures_table.edge_rows(many, "kg/s")
    assert [r["edge"] for r in rows] == [f"edge {i + 1}" for i in range(n)]
