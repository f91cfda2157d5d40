"""Tests for initgen.science.profiles: damping depth, node values and exact layer means."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from initgen.errors import InputError
from initgen.science.layers import Layers
from initgen.science.profiles import KINDS, damping_depth_m, factor

DAY = 86400.0
YEAR = 365.25 * DAY
LAYERS = Layers.from_interfaces([0.0, 0.02, 0.06, 0.15, 0.3, 0.55, 1.0, 1.7, 2.9, 4.5])

PARAMS = {
    "uniform": {},
    "exponential": {"efolding_m": 0.4},
    "linear": {"zero_at_m": 0.4},  # 0.4 lies inside layer [0.3, 0.55]: the kink is tested
    "table": {"table": [(0.01, 1.2), (0.1, 0.6), (0.5, 0.5), (0.52, -0.3), (2.0, 0.25)]},
    "damping": {"diffusivity_m2_s": 5.0e-7, "period_s": YEAR},
}


def pointwise(kind, z):
    """The profile as written in the docstring, one depth at a time (for the quad checks)."""
    p = PARAMS[kind]
    if kind == "uniform":
        return 1.0
    if kind == "exponential":
        return math.exp(-z / p["efolding_m"])
    if kind == "linear":
        return max(1.0 - z / p["zero_at_m"], 0.0)
    if kind == "table":
        d, v = zip(*p["table"])
        return float(np.interp(z, d, v))
    d = math.sqrt(p["diffusivity_m2_s"] * p["period_s"] / math.pi)
    return math.exp(-z / d)


def breakpoints(kind):
    if kind == "linear":
        return [PARAMS["linear"]["zero_at_m"]]
    if kind == "table":
        return [d for d, _ in PARAMS["table"]["table"]]
    return None


def test_damping_depth_published_worked_values():
    # reference: Carslaw and Jaeger 1959 / Hillel 1982, d = sqrt(kappa P / pi); worked values
    # for kappa = 5.0e-7 m2/s from REFERENCES.md (computed from the formula, 3 significant
    # figures, hence the tolerance of half a unit in the last printed digit)
    assert damping_depth_m(5.0e-7, YEAR) == pytest.approx(2.24, abs=0.005)
    assert damping_depth_m(5.0e-7, DAY) == pytest.approx(0.117, abs=0.0005)
    # reference: the equivalent form d = sqrt(2 kappa / omega), omega = 2 pi / P
    assert damping_depth_m(5.0e-7, DAY) == pytest.approx(math.sqrt(2 * 5.0e-7 / (2 * math.pi / DAY)),
                                                         rel=1e-14)
    arr = damping_depth_m(np.array([5.0e-7, 2.0e-6]), DAY)
    assert arr.shape == (2,) and arr[1] == pytest.approx(2 * arr[0])


@pytest.mark.parametrize("bad", [None, 0.0, -1e-7, float("nan"), float("inf")])
def test_damping_depth_rejects(bad):
    with pytest.raises(InputError, match="^diffusivity_m2_s"):
        damping_depth_m(bad, DAY)
    with pytest.raises(InputError, match="^period_s"):
        damping_depth_m(5e-7, bad)


@pytest.mark.parametrize("kind", KINDS)
def test_node_values_match_formula(kind):
    got = factor(kind, LAYERS, **PARAMS[kind])
    want = [pointwise(kind, z) for z in LAYERS.node_m]
    np.testing.assert_allclose(got, want, rtol=1e-13, atol=1e-15)
    assert got.dtype == np.float64 and got.shape == (LAYERS.n,)
    if kind != "table":
        assert np.all((got >= 0.0) & (got <= 1.0))


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("max_depth", [None, 0.41, 2.0])
def test_layer_mean_against_quad(kind, max_depth):
    got = factor(kind, LAYERS, evaluate="layer_mean", max_depth_m=max_depth, **PARAMS[kind])
    for k, (a, b) in enumerate(zip(LAYERS.top_m, LAYERS.bottom_m)):
        c = b if max_depth is None else min(max(max_depth, a), b)
        pts = [p for p in (breakpoints(kind) or []) if a < p < c] or None
        # reference: scipy.integrate.quad of the pointwise profile over [top, min(bottom, max)]
        integral = quad(lambda z: pointwise(kind, z), a, c, points=pts, epsabs=1e-13)[0] if c > a else 0.0
        assert got[k] == pytest.approx(integral / (b - a), rel=1e-9, abs=1e-12), (kind, k)


def test_layer_mean_table_beyond_ends_is_constant():
    lay = Layers.from_interfaces([0.0, 0.5, 1.0, 3.0, 4.0])
    got = factor("table", lay, table=[(0.5, 0.8), (1.0, 0.2)], evaluate="layer_mean")
    np.testing.assert_allclose(got, [0.8, 0.5, 0.2, 0.2], rtol=1e-14)
    single = factor("table", lay, table=[(0.3, 0.7)], evaluate="layer_mean")
    np.testing.assert_allclose(single, 0.7)


def test_thin_layers_mean_tends_to_node_value():
    lay = Layers.from_interfaces([1.0, 1.0 + 1e-9])
    got = factor("exponential", lay, efolding_m=0.3, evaluate="layer_mean")
    assert got[0] == pytest.approx(math.exp(-(1.0 + 5e-10) / 0.3), rel=1e-12)


def test_max_depth_node():
    got = factor("uniform", LAYERS, max_depth_m=0.5)
    np.testing.assert_array_equal(got, np.where(LAYERS.node_m > 0.5, 0.0, 1.0))


def test_bare_depths_for_nodes():
    got = factor("linear", [0.0, 0.2, 0.6], zero_at_m=0.4)
    np.testing.assert_allclose(got, [1.0, 0.5, 0.0])
    with pytest.raises(InputError, match="^layers:"):
        factor("linear", [0.0, 0.2], zero_at_m=0.4, evaluate="layer_mean")
    with pytest.raises(InputError, match="^layers:"):
        factor("uniform", [-0.1])


@pytest.mark.parametrize("kind,kwargs,key", [
    ("exponential", {}, "efolding_m"),
    ("exponential", {"efolding_m": -1.0}, "efolding_m"),
    ("exponential", {"efolding_m": 0.0}, "efolding_m"),
    ("linear", {}, "zero_at_m"),
    ("linear", {"zero_at_m": float("nan")}, "zero_at_m"),
    ("damping", {"period_s": DAY}, "diffusivity_m2_s"),
    ("damping", {"diffusivity_m2_s": 5e-7}, "period_s"),
    ("damping", {"diffusivity_m2_s": 5e-7, "period_s": -DAY}, "period_s"),
    ("table", {}, "table"),
    ("table", {"table": []}, "table"),
    ("table", {"table": [(0.5, 1.0), (0.2, 0.0)]}, "table"),
    ("table", {"table": [(0.1, 1.0), (0.2, float("inf"))]}, "table"),
    ("table", {"table": [[0.1, 1.0, 3.0]]}, "table"),
    ("uniform", {"efolding_m": 0.3}, "efolding_m"),
    ("linear", {"zero_at_m": 1.0, "table": [(0, 1)]}, "table"),
    ("uniform", {"max_depth_m": -1.0}, "max_depth_m"),
    ("nope", {}, "kind"),
    ("uniform", {"evaluate": "centre"}, "evaluate"),
])
def test_parameter_validation_names_parameter(kind, kwargs, key):
    with pytest.raises(InputError, match=f"^{key}:"):
        factor(kind, LAYERS, **kwargs)


def test_table_order_error_gives_entry():
    with pytest.raises(InputError, match="entry 1"):
        factor("table", LAYERS, table=[(0.5, 1.0), (0.2, 0.0)])
