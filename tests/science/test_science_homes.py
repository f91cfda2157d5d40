"""The shared helpers that give one home to logic the science once wrote several times.

Each check compares a helper with something outside it: a published table or formula, an
independent construction, or the public function whose documented definition it shares.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from initgen.errors import InputError
from initgen.science import geodesy
from initgen.science.layers import _first_not_increasing
from initgen.science import blocks
from initgen.science.soil import solver
from initgen.science.soil.freezing import _liq_max_below, supercooled_liquid_max
from initgen.science.soil.properties import (CLAPP_HORNBERGER_1978, _capacity, _enthalpy_density, enthalpy,
                                             heat_capacity, hydraulics_from_texture, texture_key)
from initgen.science.sources import _is_number


# ---------------------------------------------------------------- texture names

@pytest.mark.parametrize("cls", sorted(CLAPP_HORNBERGER_1978))
def test_texture_key_reaches_every_published_class(cls):
    # reference: Clapp and Hornberger (1978), Table 2 (the class names of the USDA triangle)
    for spelling in (cls.upper(), cls.replace(" ", "_"), cls.replace(" ", "-"), f"  {cls.title()}  "):
        assert texture_key(spelling) == cls
        assert hydraulics_from_texture(spelling) == hydraulics_from_texture(cls)


def test_texture_key_refuses_nothing_but_unknown_classes():
    with pytest.raises(InputError, match="Clapp and Hornberger"):
        hydraulics_from_texture("loamy clay sand")


# ---------------------------------------------------------------- the supercooled limit

def test_liq_max_below_is_the_published_worked_value():
    # reference: Niu and Yang (2006) curve, Clapp-Hornberger (1978) loam at 268.15 K: 0.1188
    # (REFERENCES.md worked value)
    v = _liq_max_below(np.array(268.15), np.array(0.451), np.array(0.478), np.array(5.39))
    assert float(v) == pytest.approx(0.1188, abs=5e-5)


@settings(max_examples=60, deadline=None)
@given(T=st.floats(200.0, 273.14), phi=st.floats(0.2, 0.9), psi=st.floats(0.01, 1.0), b=st.floats(2.0, 12.0),
       cap=st.floats(0.0, 1.0))
def test_liq_max_below_cap_is_the_public_limit_capped(T, phi, psi, b, cap):
    # the public function's definition: the formula capped at the porosity, below T_f
    a = [np.array(x) for x in (T, phi, psi, b)]
    assert float(_liq_max_below(*a, cap=np.array(phi))) == float(supercooled_liquid_max(T, phi, psi, b))
    assert float(_liq_max_below(*a, cap=np.array(cap))) == min(cap, float(_liq_max_below(*a)))


# ---------------------------------------------------------------- heat capacity and enthalpy

@settings(max_examples=60, deadline=None)
@given(T=st.floats(200.0, 320.0), liq=st.floats(0.0, 0.5), ice=st.floats(0.0, 0.5), phi=st.floats(0.3, 0.9),
       cs=st.floats(1.5e6, 3.0e6), dz=st.floats(0.01, 2.0))
def test_enthalpy_density_times_thickness_is_the_enthalpy(T, liq, ice, phi, cs, dz):
    # de Vries (1963) mixing for C, H = C (T - T_f) dz + rho_w L_f theta_liq dz (the module's one
    # energy definition): the per-volume form the mode steps use must give the same energy
    C = _capacity((1.0 - phi) * cs, np.array(liq), np.array(ice))
    assert float(C) == float(heat_capacity(liq, ice, phi, cs))
    h = float(_enthalpy_density(C, np.array(T), np.array(liq))) * dz
    H = float(enthalpy(T, liq, ice, dz, phi, cs))
    assert h == pytest.approx(H, rel=1e-12, abs=1e-6 * (abs(H) + float(C) * dz))


# ---------------------------------------------------------------- block loop

def test_map_blocks_results_do_not_depend_on_the_block_size(monkeypatch):
    # the documented promise of blocks.SOIL_BLOCK_ELEMENTS: "results do not depend on it"
    rng = np.random.default_rng(5)
    n = 5000
    H = rng.uniform(-4e6, 2e6, n)
    W = rng.uniform(0.0, 0.5, n)
    args = (H, W, 0.1, 0.45, 0.3, 5.0)
    whole = solver.solve_enthalpy(*args)
    monkeypatch.setattr(blocks, "SOIL_BLOCK_ELEMENTS", 7)
    small = solver.solve_enthalpy(*args)
    for a, b in zip(whole, small):
        np.testing.assert_array_equal(a, b)


# ---------------------------------------------------------------- longitude gaps

@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(0.0, 359.0), min_size=1, max_size=30, unique=True))
def test_circular_gaps_of_points_sum_to_the_full_circle(lons):
    # an independent fact of the circle: the gaps between n sorted points, with the one across
    # the wrap, add up to 360 degrees, and each is the next point's distance eastward
    lo = np.sort(np.array(lons))
    gaps = geodesy.circular_gaps(lo, lo)
    assert gaps.sum() == pytest.approx(360.0, abs=1e-9)
    east = np.mod(np.roll(lo, -1) - lo, 360.0)
    expected = np.where(east == 0.0, 360.0, east)       # a single point: the whole circle
    np.testing.assert_allclose(gaps, expected, atol=1e-9)


# ---------------------------------------------------------------- small checks

@pytest.mark.parametrize("arr, expected", [([0.1, 0.2, 0.3], None), ([0.1], None), ([0.1, 0.1], 1),
                                           ([0.1, 0.3, 0.2, 0.4], 2), ([0.5, 0.4], 1)])
def test_first_not_increasing(arr, expected):
    # definition: the first i with arr[i] <= arr[i - 1]
    brute = next((i for i in range(1, len(arr)) if arr[i] <= arr[i - 1]), None)
    assert brute == expected
    assert _first_not_increasing(np.array(arr)) == expected


@pytest.mark.parametrize("value, ok", [(1, True), (1.5, True), (np.float32(2), True), (np.int64(3), True),
                                       (True, False), (False, False), ("1", False), (None, False)])
def test_is_number_excludes_booleans(value, ok):
    # Python data model: bool is a subclass of int, so a plain isinstance check would accept True
    assert _is_number(value, (int, float, np.floating, np.integer)) is ok
