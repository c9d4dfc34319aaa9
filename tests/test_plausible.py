"""Plausibility checks on every value of every block (budget.plausible, issue 12).

The limits are common practice with no single source (humidity −1e-4..0.04 kg/kg, surface
pressure 300-1100 hPa, wind speed below 150 m/s, |x| > 1e15 an unmarked fill value); the
bad files are built here from invented fields (budget.testing.level_dataset).  Each case
must be refused with one sentence naming the variable, the file, the time and the cell, and
the fix; before these checks each gave a budget with impossible numbers and exit 0.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from budget import compute
from budget.constants import STANDARD_GRAVITY
from budget.errors import FieldsError
from budget.fields import open_fields
from budget.region import region_from_bbox

REGION = (5.0, 35.0, 15.0, 45.0)  # W, S, E, N: inside the 0-20°E, 30-50°N test grid


def budget_of(*paths):
    return compute(open_fields([str(p) for p in paths] if len(paths) > 1 else paths[0]),
                   region_from_bbox(*REGION), scheduler="sync")


def test_clean_fields_pass_and_flag_nothing(small_levels, write_nc):
    ds = budget_of(write_nc(small_levels, "clean.nc"))
    assert json.loads(ds.attrs["flagged_values"]) == {}
    # W = (1/g)∫ q dp from 200 hPa to ps for q = 0.012 (p/ps)^3: the analytic integral
    # 0.012 (ps^4 - p_top^4) / (4 g ps^3) = 30.57 kg m-2; the 7-level beta-factor layer sum
    # (Boer 1982) is within 3 % of it on these coarse levels (test_vertical.py checks the
    # layer sum itself against MetPy).
    ps, top = 100000.0, 20000.0
    exact = 0.012 * (ps**4 - top**4) / (4 * STANDARD_GRAVITY * ps**3)
    assert float(ds["precipitable_water"].mean()) == pytest.approx(exact, rel=0.03)


def test_humidity_in_g_per_kg_labelled_kg_per_kg_from_step_two(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["q"][2:] = bad["q"][2:] * 1000.0  # g/kg from the third step on, still labelled kg/kg
    path = write_nc(bad, "q_gkg.nc")
    with pytest.raises(FieldsError) as info:
        budget_of(path)
    msg = str(info.value)
    assert "'q'" in msg and "q_gkg.nc" in msg and "2031-06-01T02:00" in msg
    assert "°E" in msg and "°N" in msg and "--units q=g/kg" in msg
    assert msg.count(".") >= 1 and "\n" not in msg  # one sentence, no traceback text


def test_the_refusal_names_the_file_that_holds_the_bad_step(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["q"][8:] = bad["q"][8:] * 1000.0
    first = write_nc(bad.isel(time=slice(0, 6)), "part1.nc")
    second = write_nc(bad.isel(time=slice(6, 12)), "part2.nc")
    with pytest.raises(FieldsError, match=r"part2\.nc.*2031-06-01T08:00"):
        budget_of(first, second)


def test_surface_pressure_in_hpa_labelled_pa_from_step_two(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["ps"][2:] = bad["ps"][2:] / 100.0  # hPa values, still labelled Pa
    with pytest.raises(FieldsError, match=r"'ps'.*2031-06-01T02:00.*--units ps=hPa"):
        budget_of(write_nc(bad, "ps_hpa.nc"))


def test_unmarked_fill_value_in_one_cell_at_step_eleven(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["u"][11, 3, 10, 10] = 9.999e20  # lat index 10 = 40°N, lon index 10 = 10°E
    with pytest.raises(FieldsError) as info:
        budget_of(write_nc(bad, "fill.nc"))
    msg = str(info.value)
    assert "9.999e+20" in msg and "(10°E, 40°N)" in msg and "2031-06-01T11:00" in msg
    assert "fill value" in msg and "_FillValue" in msg


def test_negative_humidity_over_the_region_is_refused(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["q"][:] = -bad["q"]
    with pytest.raises(FieldsError, match=r"'q'.*not plausible; humidity cannot be that negative"):
        budget_of(write_nc(bad, "negative.nc"))


def test_small_negative_humidities_are_accepted_and_counted(small_levels, write_nc):
    odd = small_levels.copy(deep=True)
    odd["q"][4, 0, 10, 5:10] = -5e-5  # five cells of the top level at one step, inside the region
    ds = budget_of(write_nc(odd, "small_negative.nc"))
    assert json.loads(ds.attrs["flagged_values"]) == {"q": 5}
    warnings = json.loads(ds.attrs["warnings"])
    assert any("5 values of 'q'" in w and "slightly negative" in w for w in warnings)
    assert np.isfinite(ds["precipitable_water"].values).all()


def test_wind_faster_than_any_on_earth_is_refused(small_levels, write_nc):
    bad = small_levels.copy(deep=True)
    bad["u"][5] = 200.0  # m/s
    with pytest.raises(FieldsError, match=r"wind speed.*2031-06-01T05:00.*--units"):
        budget_of(write_nc(bad, "fast.nc"))


def test_values_below_the_ground_are_not_checked(small_levels, write_nc):
    # Files often hold extrapolated or fill values beneath the surface; they never count
    # (zero layer thickness, budget.vertical) and must not stop a budget.
    odd = small_levels.copy(deep=True)
    odd["ps"][:] = 80000.0  # the 850, 925 and 1000 hPa levels lie below ground
    odd["u"][:, -1] = 9.999e20
    ds = budget_of(write_nc(odd, "below.nc"))
    assert np.isfinite(ds["vapour_import"].values).all()


def test_column_inputs_refuse_a_fill_value(write_nc):
    from budget import testing

    col = testing.column_dataset(1.0, lon0=0.0, lon1=20.0, lat0=30.0, lat1=50.0, periodic=False, ntime=3)
    col["w"][2, 10, 10] = 1e20
    with pytest.raises(FieldsError, match=r"'w'.*1e\+20.*fill value"):
        budget_of(write_nc(col, "column_fill.nc"))


# -- the same cases through the command line: exit code, one line, no traceback --------------
def _cli(*args):
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)], capture_output=True, text=True, timeout=300)


def _bad(case, ds):
    bad = ds.copy(deep=True)
    if case == "q_gkg":
        bad["q"][2:] = bad["q"][2:] * 1000.0
    elif case == "ps_hpa":
        bad["ps"][2:] = bad["ps"][2:] / 100.0
    elif case == "fill":
        bad["u"][11, 3, 10, 10] = 9.999e20
    elif case == "negative_q":
        bad["q"][:] = -bad["q"]
    return bad


@pytest.mark.parametrize("case, key", [("q_gkg", "--units q=g/kg"), ("ps_hpa", "--units ps=hPa"),
                                       ("fill", "unmarked fill value"), ("negative_q", "cannot be that negative")])
def test_command_line_refuses_each_case_in_one_line(case, key, small_levels, write_nc, tmp_path):
    path = write_nc(_bad(case, small_levels), f"{case}.nc")
    before = path.read_bytes()
    out = tmp_path / "budget.csv"
    r = _cli("run", path, "--bbox", ",".join(f"{x:g}" for x in REGION), "--out", out, "--quiet")
    assert r.returncode == 3, r.stderr  # FieldsError's exit code (budget/errors.py)
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and key in lines[0], r.stderr
    assert "Traceback" not in r.stderr
    assert not out.exists() and path.read_bytes() == before  # nothing written, the input untouched


def test_command_line_summary_counts_flagged_values(small_levels, write_nc, tmp_path):
    odd = small_levels.copy(deep=True)
    odd["q"][4, 0, 10, 5:10] = -5e-5
    path = write_nc(odd, "small_negative.nc")
    r = _cli("run", path, "--bbox", ",".join(f"{x:g}" for x in REGION), "--out", tmp_path / "b.csv")
    assert r.returncode == 0, r.stderr
    assert "slightly negative" in r.stderr  # the warning
    assert any(ln.startswith("flagged values") and "q: 5" in ln for ln in r.stdout.splitlines()), r.stdout


def test_column_inputs_are_held_to_their_roles_ranges(write_nc):
    # precipitable water in g m-2 labelled kg m-2 from the second step: 1000x too much; the
    # role catalogue bounds it at 100 kg m-2 (common practice, no source)
    from budget import testing

    col = testing.column_dataset(1.0, lon0=0.0, lon1=20.0, lat0=30.0, lat1=50.0, periodic=False, ntime=3)
    col["w"][1:] = col["w"][1:] * 1000.0
    with pytest.raises(FieldsError, match=r"'w'.*2031-03-01T06:00.*above 100 kg m-2.*--units w="):
        budget_of(write_nc(col, "column_w.nc"))
