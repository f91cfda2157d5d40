"""Measured: the realised change in every soil layer equals A x w x f(z) averaged over the
layer's true interfaces, for every source of layer geometry initgen reads (physics mode none).

f(z) is integrated independently with scipy.integrate.quad over [top, bottom] of each layer:
exponential decay exp(-z/e), and the conduction damping exp(-z/d) with damping depth
d = sqrt(kappa P / pi) of a periodic surface temperature in a semi-infinite solid (Carslaw and
Jaeger 1959, Conduction of Heat in Solids, 2nd ed., section 2.6). The weights w come from
``api.weights``; A is the recipe's constant anomaly.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import netCDF4
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

import filemaker as fm
from clikit import LAYOUTS, read_raw
from initgen import api

RECIPE = """initgen_recipe: 1
name: measured-geometry
perturbations:
  - name: blk
    region: {include: [{box: {lon: [-100, 60], lat: [-50, 50]}}], taper_km: 1500, use_land_fraction: false}
    anomaly: {constant_K: ANOM}
    profile: PROFILE
    targets: [soil_temperature]
"""

SOURCES = ("axis_cf_bounds", "per_layer_cf_bounds", "per_layer_length1_axis", "depths_in_names", "top_bottom_attributes",
           "nodes_and_thickness", "layout_interfaces", "midpoints_by_name")


def _f(profile):
    if profile[0] == "exponential":
        e = profile[1]
        return lambda z: np.exp(-z / e)
    kappa, days = profile[1], profile[2]
    d = np.sqrt(kappa * days * 86400.0 / np.pi)  # Carslaw and Jaeger (1959), sec. 2.6
    return lambda z: np.exp(-z / d)


def _profile_yaml(profile):
    if profile[0] == "exponential":
        return f"{{kind: exponential, efolding_m: {profile[1]!r}, evaluate: layer_mean}}"
    return (f"{{kind: damping, diffusivity_m2_s: {profile[1]!r}, period_days: {profile[2]!r}, "
            "evaluate: layer_mean}")


def _make(source, folder: Path, icm: np.ndarray, frac: float):
    """The file (and layout) of one geometry source; returns (input, layout, variables top first,
    true interfaces in m)."""
    z = icm / 100.0
    src = folder / "in.nc"
    layout = None
    n = z.size - 1
    if source == "axis_cf_bounds":
        fm.layered_with_records(src, 1, interfaces=z)
        names = ["tsoil"]
    elif source in ("per_layer_cf_bounds", "per_layer_length1_axis"):
        fm.per_layer_cf_bounds(src, interfaces=z, order=tuple(reversed(range(n))), node_fraction=frac,
                               as_dims=source == "per_layer_length1_axis")
        names = [f"st_{'abcdefgh'[k]}" for k in range(n)]
    elif source in ("depths_in_names", "top_bottom_attributes"):
        fm.per_layer_depths_in_names(src, interfaces_cm=[int(c) for c in icm], long_names=True)
        names = [f"soil_temperature_{int(icm[k])}_{int(icm[k + 1])}cm" for k in range(n)]
        if source == "top_bottom_attributes":
            with netCDF4.Dataset(src, "a") as ds:
                for k, name in enumerate(names):
                    v = ds[name]
                    v.layer_top, v.layer_bottom, v.depth_units = z[k] * 1000.0, z[k + 1] * 1000.0, "mm"
                    ds.renameVariable(name, f"t{k}")
                    v.long_name = "soil temperature"
            names = [f"t{k}" for k in range(n)]
    elif source == "nodes_and_thickness":
        nodes = z[:-1] + frac * np.diff(z)
        fm.nodes_and_thickness(src, nodes=nodes, thickness=np.diff(z))
        layout = LAYOUTS / "node-depths-and-thickness.yaml"
        names = ["tsoil"]
    elif source == "layout_interfaces":
        fm.nodes_and_thickness(src, nodes=z[:-1] + frac * np.diff(z), thickness=np.diff(z))
        layout = folder / "l.yaml"
        layout.write_text("initgen_layout: 1\nroles: {soil_temperature: tsoil, layer_interface_depth: "
                          f"{{values: {[float(c) for c in icm]}, units: cm}}}}\n")
        names = ["tsoil"]
    else:  # midpoints_by_name: the true interfaces are, by the layout's own definition, the midpoints
        nodes = z[:-1] + 0.5 * np.diff(z)
        fm.nodes_and_thickness(src, nodes=nodes, thickness=np.diff(z))
        layout = folder / "l.yaml"
        layout.write_text("initgen_layout: 1\nroles: {soil_temperature: tsoil, layer_node_depth: layer}\n"
                          "interfaces: midpoints_between_nodes\n")
        mid = 0.5 * (nodes[:-1] + nodes[1:])
        z = np.concatenate([[0.0], mid, [2 * nodes[-1] - (mid[-1] if mid.size else 0.0)]])
        names = ["tsoil"]
    return src, layout, names, z


def _raw(path, name):
    return read_raw(path, name, np.float64)


@pytest.mark.parametrize("source", SOURCES)
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(thick_cm=st.lists(st.integers(2, 120), min_size=1, max_size=5),
       frac=st.floats(0.2, 0.8),
       anom=st.floats(-6.0, 6.0).filter(lambda a: abs(a) > 0.5),
       profile=st.one_of(st.tuples(st.just("exponential"), st.floats(0.05, 3.0)),
                         st.tuples(st.just("damping"), st.floats(2e-7, 1.5e-6), st.floats(1.0, 400.0))))
def test_realised_change_is_a_w_layer_mean_f(source, thick_cm, frac, anom, profile):
    icm = np.concatenate([[0], np.cumsum(thick_cm)]).astype(float)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        src, layout, names, z = _make(source, folder, icm, frac)
        rec = folder / "r.yaml"
        rec.write_text(RECIPE.replace("ANOM", repr(anom)).replace("PROFILE", _profile_yaml(profile)))
        lay = None if layout is None else shutil.copy(layout, folder / "layout.yaml")
        res = api.check(rec, lay, src)
        np.testing.assert_allclose(res.model.layers.interfaces_m, z, atol=2e-7)
        w, _, _ = api.weights(rec, src, lay)
        assert 0 < np.count_nonzero((w > 0) & (w < 1)) and np.count_nonzero(w == 1) > 0
        api.apply(rec, src, folder / "out.nc", layout=lay)
        f = _f(profile)
        fbar = [quad(f, z[k], z[k + 1])[0] / (z[k + 1] - z[k]) for k in range(z.size - 1)]
        for k in range(z.size - 1):
            if len(names) == 1:
                d = (_raw(folder / "out.nc", names[0]) - _raw(src, names[0])).reshape(-1, z.size - 1, *w.shape)[0, k]
            else:
                d = (_raw(folder / "out.nc", names[k]) - _raw(src, names[k])).reshape(w.shape)
            # stored as float32 near 275 K: one unit in the last place is 3e-5 K
            np.testing.assert_allclose(d, anom * w * fbar[k], atol=1e-4, rtol=0,
                                       err_msg=f"{source}: layer {k} ({z[k]:g}..{z[k + 1]:g} m)")
