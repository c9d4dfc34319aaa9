"""Layers of the air column (budget.layers): the layers tile the column, so their integrals
sum to the column integral of budget.vertical (the beta-factor scheme of Boer 1982 and
Trenberth 1991 on pressure levels; Δp = Δa p0 + Δb ps on CF hybrid levels), and a uniform
field gives each layer its pressure thickness over g (the hydrostatic mass of a layer per unit
area, Δp / g)."""

import numpy as np
import pytest

from budget.constants import STANDARD_GRAVITY as G
from budget.errors import RequestError
from budget.layers import column_top, layer_fractions, layer_integrals, parse_layers
from budget.vertical import HybridLevels, PressureLevels, column_integral

P = np.array([100, 150, 200, 250, 300, 400, 500, 600, 700, 850, 925, 1000]) * 100.0


def _setup(vertical, ps, layers_text):
    dp = vertical.thickness(ps)  # (level, cell)
    frac = layer_fractions(dp, column_top(vertical, ps), ps, parse_layers(layers_text))
    return dp, frac


def test_layers_sum_to_the_column_on_pressure_levels():
    rng = np.random.default_rng(1)
    ps = np.array([1013.0, 990.0, 850.0, 640.0, 1032.0]) * 100.0  # incl. high ground, ps > 1000
    q = rng.uniform(0, 0.02, (P.size, ps.size))
    vert = PressureLevels(P)
    dp, frac = _setup(vert, ps, "1000,850,700,500,300,100")
    lay = layer_integrals(q, frac, level_axis=0)
    np.testing.assert_allclose(lay.sum(axis=0), column_integral(q, dp, level_axis=0), rtol=1e-12)


def test_a_uniform_field_gives_each_layer_its_thickness_over_g():
    ps = np.array([1000.0, 950.0]) * 100.0
    dp, frac = _setup(PressureLevels(P), ps, "1000,850,700,500,300,100")
    lay = layer_integrals(np.ones((P.size, ps.size)), frac, level_axis=0)
    names = parse_layers("1000,850,700,500,300,100").names()
    assert names[0] == "sfc_1000hPa" and names[1] == "1000_850hPa" and names[-1] == "100hPa_top"
    # 850-700 hPa holds 150 hPa of air in both columns: 15000 Pa / g
    assert lay[names.index("850_700hPa")] == pytest.approx(np.full(2, 15000.0 / G))
    # 1000-850 hPa: the full 150 hPa over ps = 1000 hPa, only 100 hPa over ps = 950 hPa
    assert lay[names.index("1000_850hPa")] == pytest.approx([15000.0 / G, 10000.0 / G])
    # nothing lies below 1000 hPa or above the top level (100 hPa)
    assert lay[0] == pytest.approx([0.0, 0.0]) and lay[-1] == pytest.approx([0.0, 0.0])


def test_hybrid_levels_in_sigma_layers():
    # CF hybrid sigma-pressure: interface p = a + b ps (top first); Σ Δp = ps - p_top exactly
    a = np.array([1000.0, 5000.0, 8000.0, 6000.0, 2000.0, 0.0])
    b = np.array([0.0, 0.0, 0.1, 0.4, 0.8, 1.0])
    ps = np.array([101325.0, 70000.0])
    vert = HybridLevels(a, b)
    dp, frac = _setup(vert, ps, "sigma:1,0.7,0.4")
    lay = layer_integrals(np.ones((a.size - 1, ps.size)), frac, level_axis=0)
    np.testing.assert_allclose(lay.sum(axis=0), (ps - a[0]) / G, rtol=1e-12)
    # the 1-0.7 sigma layer holds 0.3 ps of air
    np.testing.assert_allclose(lay[0], 0.3 * ps / G, rtol=1e-12)


@pytest.mark.parametrize("text,word", [("1000", "two bounds"), ("a,b", "numbers"), ("100000,85000", "hPa"), ("sigma:2,1", "sigma")])
def test_bad_layer_lists_say_what_to_write(text, word):
    with pytest.raises(RequestError, match=word):
        parse_layers(text)
