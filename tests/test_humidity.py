"""Tests of budget.humidity against MetPy and a second, independent saturation formula.

References
- MetPy 1.7 (general-purpose library): `saturation_vapor_pressure` (Ambaum 2020 solutions,
  independent of Bolton), `specific_humidity_from_dewpoint`,
  `mixing_ratio_from_relative_humidity`, `specific_humidity_from_mixing_ratio`.
- Murphy and Koop (2005, Q. J. R. Meteorol. Soc. 131, 1539-1565), eq. 10 (liquid) and eq. 7
  (ice), written out below from memory; both reproduce the IAPWS triple-point pressure
  611.657 Pa at 273.16 K, which is checked first.
- Bolton (1980) states about 0.1 % accuracy between -30 and 35 degC (from memory); against
  the two references above it agrees within 0.25 % and 0.4 % there, the bounds used.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from budget import humidity
from budget.constants import EPSILON


def murphy_koop_liquid(t):
    return np.exp(54.842763 - 6763.22 / t - 4.210 * np.log(t) + 0.000367 * t
                  + np.tanh(0.0415 * (t - 218.8))
                  * (53.878 - 1331.22 / t - 9.44523 * np.log(t) + 0.014025 * t))


def murphy_koop_ice(t):
    return np.exp(9.550426 - 5723.265 / t + 3.53068 * np.log(t) - 0.00728332 * t)


T_WATER = np.arange(-30.0, 35.01, 2.5) + 273.15
T_ICE = np.arange(-40.0, 0.01, 2.5) + 273.15


def test_second_formula_reproduces_the_triple_point():
    # IAPWS: saturation pressure at the triple point 273.16 K is 611.657 Pa (from memory)
    assert murphy_koop_liquid(273.16) == pytest.approx(611.657, abs=0.01)
    assert murphy_koop_ice(273.16) == pytest.approx(611.657, abs=0.01)


def test_bolton_at_zero_and_against_murphy_koop():
    # Bolton (1980) eq. 10 gives 6.112 hPa at 0 degC by construction
    assert humidity.saturation_vapour_pressure_water(273.15) == pytest.approx(611.2, rel=1e-12)
    es = humidity.saturation_vapour_pressure_water(T_WATER)
    np.testing.assert_allclose(es, murphy_koop_liquid(T_WATER), rtol=2.5e-3)


def test_alduchov_eskridge_ice_against_murphy_koop():
    ei = humidity.saturation_vapour_pressure_ice(T_ICE)
    np.testing.assert_allclose(ei, murphy_koop_ice(T_ICE), rtol=1.5e-3)
    # ice saturates below water below 0 degC (physics: the ice curve lies under the liquid one)
    assert np.all(ei[:-1] < humidity.saturation_vapour_pressure_water(T_ICE[:-1]))


def test_saturation_against_metpy():
    import metpy.calc as mc
    from metpy.units import units

    ref = mc.saturation_vapor_pressure(T_WATER * units.K).m_as("Pa")
    np.testing.assert_allclose(humidity.saturation_vapour_pressure_water(T_WATER), ref, rtol=4e-3)
    ref_i = mc.saturation_vapor_pressure(T_ICE * units.K, phase="solid").m_as("Pa")
    np.testing.assert_allclose(humidity.saturation_vapour_pressure_ice(T_ICE), ref_i, rtol=2e-3)


def test_epsilon_matches_metpy():
    from metpy.constants import epsilon

    assert EPSILON == pytest.approx(float(epsilon.m), rel=1e-9)


# a sounding-like set of levels: pressure (Pa), temperature (K), dew point depression (K)
P = np.array([100000.0, 92500.0, 85000.0, 70000.0, 50000.0, 30000.0])
T = np.array([303.0, 297.0, 292.0, 281.0, 265.0, 252.0])  # Td stays within -30..35 degC
TD = T - np.array([2.0, 4.0, 6.0, 10.0, 12.0, 8.0])


def test_q_from_dewpoint_against_metpy():
    import metpy.calc as mc
    from metpy.units import units

    ref = mc.specific_humidity_from_dewpoint(P * units.Pa, TD * units.K).m_as("kg/kg")
    np.testing.assert_allclose(humidity.q_from_dewpoint(TD, P), ref, rtol=4e-3)


def test_q_from_relative_humidity_against_metpy():
    import metpy.calc as mc
    from metpy.units import units

    rh = np.array([0.9, 0.8, 0.65, 0.5, 0.3, 0.2])
    w = mc.mixing_ratio_from_relative_humidity(P * units.Pa, T * units.K, rh).m_as("kg/kg")
    np.testing.assert_allclose(humidity.q_from_relative_humidity(rh, T, P), w / (1 + w), rtol=4e-3)


def test_q_from_mixing_ratio_and_vapour_pressure_exact():
    import metpy.calc as mc
    from metpy.units import units

    r = np.array([0.0, 0.001, 0.012, 0.03])
    ref = mc.specific_humidity_from_mixing_ratio(r * units("kg/kg")).m_as("kg/kg")
    np.testing.assert_allclose(humidity.q_from_mixing_ratio(r), ref, rtol=1e-12)
    # the vapour-pressure form inverts e = q p / (eps + (1 - eps) q) exactly (algebra)
    q = np.array([0.001, 0.01, 0.02])
    e = q * P[:3] / (EPSILON + (1 - EPSILON) * q)
    np.testing.assert_allclose(humidity.q_from_vapour_pressure(e, P[:3]), q, rtol=1e-12)


def test_ice_phase_below_freezing_only():
    t = np.array([263.15, 283.15])
    es = humidity.saturation_vapour_pressure(t, "ice")
    assert es[0] == humidity.saturation_vapour_pressure_ice(t[0])
    assert es[1] == humidity.saturation_vapour_pressure_water(t[1])
    assert humidity.phase_of({"long_name": "relative humidity with respect to ice"}) == "ice"
    assert humidity.phase_of({"long_name": "relative humidity"}) == "water"


# -- the IFS mixed phase ----------------------------------------------------------------------
# IFS Documentation CY47R3, Part IV: Physical Processes (ECMWF 2021), chapter 12: saturation
# over water and ice by Tetens forms a1 exp(a3 (T - T0) / (T - a4)), a1 = 611.21 Pa,
# T0 = 273.16 K; water a3 = 17.502, a4 = 32.19 K; ice a3 = 22.587, a4 = -0.7 K; mixed phase
# es = alpha esw + (1 - alpha) esi, alpha = ((T - Ti) / (T0 - Ti))^2, Ti = 250.16 K, alpha = 1 at
# and above T0, 0 at and below Ti.  Written out here again, scalar by scalar, from the cited text.
def ifs_mixed(t):
    esw = 611.21 * math.exp(17.502 * (t - 273.16) / (t - 32.19))
    esi = 611.21 * math.exp(22.587 * (t - 273.16) / (t + 0.7))
    if t >= 273.16:
        return esw
    if t <= 250.16:
        return esi
    alpha = ((t - 250.16) / (273.16 - 250.16)) ** 2
    return alpha * esw + (1.0 - alpha) * esi


def test_mixed_phase_follows_the_ifs_formula():
    t = np.arange(230.0, 300.01, 0.5)
    got = humidity.saturation_vapour_pressure(t, "mixed")
    np.testing.assert_allclose(got, [ifs_mixed(float(x)) for x in t], rtol=1e-12)
    # the blend's own points: all ice at Ti, all water at T0, alpha = 1/4 halfway (quadratic)
    half = 0.5 * (250.16 + 273.16)
    esw = 611.21 * math.exp(17.502 * (half - 273.16) / (half - 32.19))
    esi = 611.21 * math.exp(22.587 * (half - 273.16) / (half + 0.7))
    assert humidity.saturation_vapour_pressure_mixed(np.array(half)) == pytest.approx(0.25 * esw + 0.75 * esi, rel=1e-12)
    # at the triple point both Tetens forms give a1 exactly
    assert humidity.saturation_vapour_pressure_mixed(np.array(273.16)) == pytest.approx(611.21, rel=1e-12)


def test_mixed_phase_end_points_against_metpy_water_and_ice():
    import metpy.calc as mpcalc
    from metpy.units import units

    warm = np.arange(273.5, 308.01, 2.5)  # all water: MetPy over liquid (Ambaum 2020)
    cold = np.arange(233.15, 250.01, 2.5)  # all ice: MetPy over ice
    mp_w = mpcalc.saturation_vapor_pressure(warm * units.kelvin, phase="liquid").to("Pa").magnitude
    mp_i = mpcalc.saturation_vapor_pressure(cold * units.kelvin, phase="solid").to("Pa").magnitude
    # Tetens forms against MetPy's exact-thermodynamics solution: within 0.5 % (IFS forms are
    # fits of that accuracy over these ranges; common practice, no source for the bound)
    np.testing.assert_allclose(humidity.saturation_vapour_pressure(warm, "mixed"), mp_w, rtol=5e-3)
    np.testing.assert_allclose(humidity.saturation_vapour_pressure(cold, "mixed"), mp_i, rtol=5e-3)
    # between, the blend lies between MetPy's ice and liquid values
    mid = np.arange(251.0, 273.0, 1.0)
    lo = mpcalc.saturation_vapor_pressure(mid * units.kelvin, phase="solid").to("Pa").magnitude
    hi = mpcalc.saturation_vapor_pressure(mid * units.kelvin, phase="liquid").to("Pa").magnitude
    got = humidity.saturation_vapour_pressure(mid, "mixed")
    assert np.all(got > lo * (1 - 5e-3)) and np.all(got < hi * (1 + 5e-3))


def test_unknown_reference_is_refused():
    with pytest.raises(ValueError, match="water, ice, mixed"):
        humidity.saturation_vapour_pressure(np.array(260.0), "liquid")
