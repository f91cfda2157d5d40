"""Snow under a perturbation: only active snow layers change; in energy mode snow warmed past
0 C melts (the energy is not thrown away); the skin cap under snow respects a snow cover
fraction. Files are small regular grids shaped like models' snow sections.

Constants: L_f = 3.337e5 J kg-1 and c_i = 2117.27 J kg-1 K-1 (initgen.science.constants); the melt
rule is the enthalpy balance m c_i (T - T_f) = L_f * melt (common practice in land models'
snow schemes).
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from initgen import api
from initgen.science.constants import CP_ICE, LATENT_HEAT_FUSION, T_FREEZE
from initgen.errors import InputError

RECIPE = """initgen_recipe: 1
name: snow-test
perturbations:
  - name: box
    region: {{include: [{{box: {{lon: [-60, 60], lat: [-30, 30]}}}}], taper_km: 0}}
    anomaly: {{constant_K: {dT}}}
    profile: {{kind: uniform}}
    targets: [{targets}]
physics: {{mode: {mode}, texture: loam}}
"""

LAYOUT = """initgen_layout: 1
name: snow-test
roles:
  longitude: lon
  latitude: lat
  soil_temperature: tsoil
  layer_interface_depth: zi
  snow_temperature: tsnow
  snow_mass: swe
  skin_temperature: tskin
{extra}
layer_dimension: layer
"""


def snow_file(path, tsnow=(270.0, 272.5, 273.0), layer_mass=(2.0, 5.0, 0.0), swe=7.0, count=2,
              tskin=273.0, cover=None):
    """4 x 4 cells of 30 degrees; 3 snow layers (top first) with temperatures ``tsnow``, layer
    masses, a snow-layer count, total snow ``swe`` kg m-2, a skin temperature and optionally a
    snow cover fraction; one soil layer."""
    lon, lat = np.arange(-45.0, 60, 30), np.arange(-45.0, 60, 30)
    with netCDF4.Dataset(path, "w") as ds:
        for d, n in (("lon", 4), ("lat", 4), ("layer", 1), ("iface", 2), ("snowl", 3)):
            ds.createDimension(d, n)
        ds.createVariable("lon", "f8", ("lon",))[:] = lon
        ds.createVariable("lat", "f8", ("lat",))[:] = lat
        v = ds.createVariable("zi", "f8", ("iface",))
        v.units = "m"
        v[:] = [0.0, 0.1]

        def var(name, dims, value, units):
            v = ds.createVariable(name, "f8", dims, fill_value=-1e30)
            v.units = units
            shape = tuple(len(ds.dimensions[d]) for d in dims)
            v[:] = np.broadcast_to(np.asarray(value, float).reshape((-1,) + (1,) * (len(dims) - 1))
                                   if np.ndim(value) else value, shape)

        var("tsoil", ("layer", "lat", "lon"), 270.0, "K")
        var("tsnow", ("snowl", "lat", "lon"), tsnow, "K")
        var("snowm", ("snowl", "lat", "lon"), layer_mass, "kg m-2")
        var("nsnow", ("lat", "lon"), count, "1")
        var("swe", ("lat", "lon"), swe, "kg m-2")
        var("tskin", ("lat", "lon"), tskin, "K")
        if cover is not None:
            var("fsnow", ("lat", "lon"), cover, "1")
    return path


def run(tmp_path, extra="", dT=2.0, mode="energy", targets="snow_temperature", **file_kw):
    f = snow_file(tmp_path / "in.nc", **file_kw)
    (tmp_path / "r.yaml").write_text(RECIPE.format(dT=dT, mode=mode, targets=targets))
    (tmp_path / "l.yaml").write_text(LAYOUT.format(extra=extra))
    out = tmp_path / "out.nc"
    rec = api.apply(tmp_path / "r.yaml", f, out, layout=tmp_path / "l.yaml")
    with netCDF4.Dataset(out) as ds:
        vals = {k: np.array(ds[k][:]) for k in ("tsnow", "snowm", "swe", "tskin")}
    return rec["ledger"], vals


def test_energy_mode_melts_snow_warmed_past_freezing_by_the_energy_balance(tmp_path):
    """Layers 2 kg m-2 at 270 K and 5 kg m-2 at 272.5 K, +2 K in energy mode: the first warms
    to 272 K; the second would reach 274.5 K, so it stays at 273.15 K and its 1.35 K of excess
    energy melts 5 * 2117.27 * 1.35 / 3.337e5 = 0.042827 kg m-2 (enthalpy balance)."""
    led, v = run(tmp_path, extra="  snow_layer_mass: snowm")
    melt = 5.0 * CP_ICE * (272.5 + 2.0 - T_FREEZE) / LATENT_HEAT_FUSION
    assert melt == pytest.approx(0.042827, abs=1e-6)
    c = (slice(None), 1, 1)
    np.testing.assert_allclose(v["tsnow"][c], [272.0, T_FREEZE, 273.0])   # third layer: no snow
    np.testing.assert_allclose(v["snowm"][c], [2.0, 5.0 - melt, 0.0], rtol=1e-12)
    assert v["swe"][1, 1] == pytest.approx(7.0 - melt, rel=1e-12)
    assert led["physics"]["snow_melted_per_layer_kg_m2"][1] == pytest.approx(melt, rel=1e-9)
    assert "snow_temperature_above_freezing" not in led["clamps"]


def test_temperature_mode_caps_snow_at_freezing_and_counts_the_clamp(tmp_path):
    led, v = run(tmp_path, extra="  snow_layer_mass: snowm", mode="temperature")
    np.testing.assert_allclose(v["tsnow"][:, 1, 1], [272.0, T_FREEZE, 273.0])
    np.testing.assert_allclose(v["snowm"][:, 1, 1], [2.0, 5.0, 0.0])
    # the box holds 2 x 4 cells of the 30-degree grid; one layer of each goes past 0 C
    assert led["clamps"]["snow_temperature_above_freezing"] == 8


@pytest.mark.parametrize("which, changed", [("first", [True, True, False]), ("last", [False, True, True])])
def test_only_the_counted_snow_layers_change(tmp_path, which, changed):
    led, v = run(tmp_path, extra=f"  snow_layer_count: nsnow\nsnow_layer_count_active: {which}",
                 dT=-1.0, tsnow=(260.0, 261.0, 262.0))
    moved = v["tsnow"][:, 1, 1] != np.array([260.0, 261.0, 262.0])
    assert moved.tolist() == changed
    assert which in led["notes"]["snow_layers_active"]


def test_a_snow_layer_count_without_its_order_is_refused(tmp_path):
    with pytest.raises(InputError, match="snow_layer_count_active"):
        run(tmp_path, extra="  snow_layer_count: nsnow", dT=-1.0)


def test_without_layer_masses_the_equal_split_is_a_guess_the_ledger_names(tmp_path):
    """Total 7 kg m-2 over 3 layers (no count, no layer masses): 7/3 each; the 273 K layer at
    +2 K melts 7/3 * 2117.27 * 1.85 / 3.337e5 kg m-2, and the ledger says it guessed."""
    led, v = run(tmp_path)
    melt = 7.0 / 3.0 * CP_ICE * (273.0 + 2.0 - T_FREEZE) / LATENT_HEAT_FUSION
    m2 = 7.0 / 3.0 * CP_ICE * (272.5 + 2.0 - T_FREEZE) / LATENT_HEAT_FUSION
    assert v["swe"][1, 1] == pytest.approx(7.0 - melt - m2, rel=1e-12)
    assert "guess" in led["notes"]["snow_layer_mass"]


def test_skin_cap_under_partial_snow_cover(tmp_path):
    """Skin at 273 K warmed by 2 K under snow: full cover caps it at 273.15 K; a cover fraction
    of 0.25 caps only the snow part: 0.25 * 273.15 + 0.75 * 275.0 = 274.5375 K."""
    tgt = "skin_temperature"
    _, v = run(tmp_path, targets=tgt, mode="none")
    assert v["tskin"][1, 1] == pytest.approx(T_FREEZE)
    (tmp_path / "b").mkdir()
    _, v = run(tmp_path / "b", targets=tgt, mode="none", extra="  snow_cover_fraction: fsnow", cover=0.25)
    assert v["tskin"][1, 1] == pytest.approx(0.25 * T_FREEZE + 0.75 * 275.0, rel=1e-12)
