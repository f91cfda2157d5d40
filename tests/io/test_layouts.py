"""The shipped example layouts, each exercised by a test file of that shape."""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from initgen import api
from clikit import read_raw as raw
from clikit import LAYOUTS

RECIPE = """initgen_recipe: 1
name: layout-test
perturbations:
  - name: box
    region: {include: [{box: {lon: [-20, 40], lat: [-10, 30]}}], taper_km: 0}
    anomaly: {constant_K: -2.0}
    profile: {kind: exponential, efolding_m: 0.5}
    targets: TARGETS
"""


def recipe(tmp_path, targets="[soil_temperature]", physics=""):
    p = tmp_path / "r.yaml"
    p.write_text(RECIPE.replace("TARGETS", targets) + physics)
    return p


def gridded_file(path, fields):
    """A 10-degree global file in the shape of the gridded-layered layout; ``fields`` gives
    (name, constant value, units) of each layered variable."""
    lon = np.arange(-175, 180, 10.0)
    lat = np.arange(-85, 90, 10.0)
    z = np.array([0.05, 0.2, 0.5, 1.2])
    with netCDF4.Dataset(path, "w") as ds:
        for d, n in (("lon", lon.size), ("lat", lat.size), ("layer", z.size)):
            ds.createDimension(d, n)
        ds.createVariable("lon", "f8", ("lon",))[:] = lon
        ds.createVariable("lat", "f8", ("lat",))[:] = lat
        v = ds.createVariable("layer_z", "f4", ("layer",))
        v.units = "m"
        v[:] = z
        v = ds.createVariable("layer_dz", "f4", ("layer",))  # nodes inside layers of these thicknesses
        v.units = "m"
        v[:] = [0.1, 0.2, 0.4, 1.0]
        for name, val, units in fields:
            v = ds.createVariable(name, "f4", ("layer", "lat", "lon"), fill_value=np.float32(-1e30))
            v.units = units
            v[:] = np.full((z.size, lat.size, lon.size), val, "f4")
        ds.createVariable("land_frac", "f4", ("lat", "lon"))[:] = np.ones((lat.size, lon.size))
        ds.createVariable("orog", "f4", ("lat", "lon"))[:] = np.zeros((lat.size, lon.size))


def test_gridded_layered_layout_with_physics(tmp_path):
    gridded_file(tmp_path / "g.nc", (("soil_t", 272.0, "K"), ("soil_liq", 20.0, "kg m-2"), ("soil_ice", 5.0, "kg m-2")))
    out = tmp_path / "g.out.nc"
    # 20 kg m-2 of liquid at 272 K is more than loam can hold unfrozen: the start is flagged
    with pytest.warns(UserWarning, match="not in phase equilibrium"):
        rec = api.apply(recipe(tmp_path, physics="physics: {mode: energy, texture: loam}\n"), tmp_path / "g.nc", out,
                        layout=LAYOUTS / "gridded-layered.yaml")
    assert rec["ledger"]["physics"]["frozen_region_total_kg"] > 0
    w0, w1 = raw(tmp_path / "g.nc", "soil_liq") + raw(tmp_path / "g.nc", "soil_ice"), raw(out, "soil_liq") + raw(out, "soil_ice")
    np.testing.assert_allclose(w1, w0, rtol=1e-6)  # water mass per layer conserved


def test_columns_with_combined_snow_soil_axis(tmp_path):
    rng = np.random.default_rng(3)
    n = 400
    lon = rng.uniform(-180, 180, n)
    lat = rng.uniform(-60, 80, n)
    nsnow, nsoil = 3, 5
    t = np.concatenate([np.full((nsnow, n), 265.0), np.full((nsoil, n), 275.0)]).astype("f4")
    with netCDF4.Dataset(tmp_path / "c.nc", "w") as ds:
        ds.createDimension("column", n)
        ds.createDimension("levels", nsnow + nsoil)
        ds.createVariable("col_lon", "f8", ("column",))[:] = lon
        ds.createVariable("col_lat", "f8", ("column",))[:] = lat
        v = ds.createVariable("col_area", "f8", ("column",))
        v.units = "m2"
        v[:] = np.full(n, 1e8)
        v = ds.createVariable("t_layers", "f4", ("column", "levels"))
        v.units = "K"
        v[:] = t.T
        v = ds.createVariable("swe", "f4", ("column",))
        v.units = "kg m-2"
        v[:] = np.full(n, 50.0, "f4")
    out = tmp_path / "c.out.nc"
    rec = api.apply(recipe(tmp_path, "[soil_temperature, snow_temperature]"), tmp_path / "c.nc", out,
                    layout=LAYOUTS / "columns-snow-soil.yaml")
    d = raw(out, "t_layers") - raw(tmp_path / "c.nc", "t_layers")
    inside = (lon > -20) & (lon < 40) & (lat > -10) & (lat < 30)
    assert inside.sum() > 5
    assert not d[~inside].any()
    # soil part: exponential factors at the soil nodes (mid-points of the given interfaces, cm -> m)
    interfaces = np.array([0, 4, 12, 30, 70, 150]) / 100.0
    nodes = 0.5 * (interfaces[:-1] + interfaces[1:])
    np.testing.assert_allclose(d[inside][:, nsnow:].mean(axis=0), -2.0 * np.exp(-nodes / 0.5), atol=3e-5)
    # snow part: the surface factor f(0) = 1
    np.testing.assert_allclose(d[inside][:, :nsnow], -2.0, atol=3e-5)
    assert rec["ledger"]["grid"]["kind"] == "points"


def test_per_layer_variables_with_land_mask(tmp_path):
    lon = np.arange(0.5, 360, 1.0)
    lat = np.arange(89.5, -90, -1.0)  # north to south
    with netCDF4.Dataset(tmp_path / "p.nc", "w", format="NETCDF3_64BIT_OFFSET") as ds:
        ds.createDimension("longitude", lon.size)
        ds.createDimension("latitude", lat.size)
        ds.createVariable("longitude", "f4", ("longitude",))[:] = lon
        ds.createVariable("latitude", "f4", ("latitude",))[:] = lat
        mask = (np.add.outer(np.arange(lat.size), np.arange(lon.size)) % 3 != 0).astype("f4")
        ds.createVariable("landmask", "f4", ("latitude", "longitude"))[:] = mask
        for k, name in enumerate(["tsl_a", "tsl_b", "tsl_c", "tsl_d"]):
            v = ds.createVariable(name, "f4", ("latitude", "longitude"))
            v.units = "degC"
            v[:] = np.full(mask.shape, 5.0 + k, "f4")
    out = tmp_path / "p.out.nc"
    api.apply(recipe(tmp_path), tmp_path / "p.nc", out, layout=LAYOUTS / "per-layer-variables.yaml")
    nodes = np.array([0.05, 0.2, 0.55, 1.4])
    for k, name in enumerate(["tsl_a", "tsl_b", "tsl_c", "tsl_d"]):
        d = raw(out, name) - raw(tmp_path / "p.nc", name)
        assert not d[mask == 0].any()  # ocean per the land mask never changes
        changed = d[d != 0]
        # a change of -2 K is -2 degC: units are read from the file (degC)
        np.testing.assert_allclose(changed, -2.0 * np.exp(-nodes[k] / 0.5), atol=2e-6)
    with netCDF4.Dataset(out) as ds:
        assert ds.data_model == "NETCDF3_64BIT_OFFSET"


def test_overfull_pores_are_flagged_not_changed(tmp_path):
    """Water above porosity before the change is reported in the ledger and the water kept."""
    gridded_file(tmp_path / "g.nc", (("soil_t", 280.0, "K"), ("soil_liq", 0.6, "m3 m-3"), ("soil_ice", 0.0, "m3 m-3")))
    out = tmp_path / "g.out.nc"
    rec = api.apply(recipe(tmp_path, physics="physics: {mode: temperature, texture: loam}\n"), tmp_path / "g.nc", out,
                    layout=LAYOUTS / "gridded-layered.yaml")
    # loam porosity 0.451 (Clapp and Hornberger 1978, Table 2) < 0.6 m3 m-3 of liquid
    assert rec["ledger"]["flags"]["water_above_porosity_kept"] > 0
    assert np.array_equal(raw(out, "soil_liq"), raw(tmp_path / "g.nc", "soil_liq"))


def test_units_checks_altitude_km_volumetric_above_one_and_missing_units(tmp_path):
    from initgen.cli import main

    gridded_file(tmp_path / "g.nc", (("soil_t", 272.0, ""), ("soil_liq", 1.5, "m3 m-3"), ("soil_ice", 0.0, "m3 m-3")))
    with netCDF4.Dataset(tmp_path / "g.nc", "a") as ds:
        ds["orog"][:] = np.full(ds["orog"].shape, 2.5)  # 2.5 km
        ds["orog"].units = "km"
        ds["soil_t"].delncattr("units")
    band = RECIPE.replace("taper_km: 0}", "taper_km: 0, elevation: {min_m: 2000}}").replace("TARGETS", "[soil_temperature]")
    (tmp_path / "band.yaml").write_text(band)
    # no units on the soil temperature: assumed K, with a warning naming the variable
    with pytest.warns(UserWarning, match="'soil_t'.*no units attribute; assuming K"):
        rec = api.preview(tmp_path / "band.yaml", tmp_path / "g.nc", layout=LAYOUTS / "gridded-layered.yaml")
    # km are read as km: 2.5 km is above the 2000 m band, so the region keeps its cells
    assert rec["region"]["cells_weight_above_0"] > 0
    # 1.5 m3 m-3 of liquid cannot be: refused in a physics mode, naming the variable and its units
    phys = tmp_path / "phys.yaml"
    phys.write_text(band + "physics: {mode: temperature, texture: loam}\n")
    assert main(["preview", str(phys), "-i", str(tmp_path / "g.nc"), "-l", str(LAYOUTS / "gridded-layered.yaml")]) == 2


def test_layout_units_apply_to_variables_without_a_units_attribute(tmp_path):
    import warnings

    from filemaker import points

    lon = np.linspace(-10, 30, 50)
    lat = np.linspace(-5, 25, 50)
    src = points(tmp_path / "p.nc", lon, lat, T=np.full((5, 50), 3.0, "f4"))
    with netCDF4.Dataset(src, "a") as ds:
        ds["tsoil"].delncattr("units")
    layout = tmp_path / "l.yaml"
    layout.write_text("initgen_layout: 1\nroles: {longitude: clon, latitude: clat, soil_temperature: tsoil, "
                      "cell_area: null}\nunits: {soil_temperature: degC}\n")
    rec = tmp_path / "r.yaml"
    rec.write_text(RECIPE.replace("TARGETS", "[soil_temperature]")
                   .replace("physics", "") + "physics: {soil_temperature_min_K: 273.15}\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)  # no "assuming K" warning: the layout says degC
        warnings.filterwarnings("ignore", message=".*no cell-area variable.*")
        api.apply(rec, src, tmp_path / "o.nc", layout=layout)
    # 3 degC cooled by up to 2 K stays above the 0 degC = 273.15 K bound: no clamp, as in degC
    d = raw(tmp_path / "o.nc", "tsoil") - raw(src, "tsoil")
    assert d.min() < -1.0 and raw(tmp_path / "o.nc", "tsoil").min() >= 1.0 - 1e-5


def _physics_params_file(tmp_path, extra):
    gridded_file(tmp_path / "g.nc", (("soil_t", 274.0, "K"), ("soil_liq", 0.30, "m3 m-3"), ("soil_ice", 0.0, "m3 m-3")))
    with netCDF4.Dataset(tmp_path / "g.nc", "a") as ds:
        for name, val, units in extra:
            v = ds.createVariable(name, "f4", ("layer", "lat", "lon"))
            v.units = units
            data = np.full(v.shape, val, "f4")
            data[:, 0, 0] = np.nan  # a polar cell outside the region: missing parameters there are fine
            v[:] = data
    return tmp_path / "g.nc"


def _layout_with(tmp_path, roles):
    text = (LAYOUTS / "gridded-layered.yaml").read_text().replace("layer_dimension:", roles + "\nlayer_dimension:")
    (tmp_path / "l.yaml").write_text(text)
    return tmp_path / "l.yaml"


def test_file_soil_parameters_units_suction_and_fractions(tmp_path):
    """Loam of Clapp and Hornberger (1978, Table 2): b 5.39, psi_s 47.8 cm, porosity 0.451, given
    in a file as suction in 'mm H2O' (negative, as models store potentials), or as sand and
    clay fractions for Cosby et al. (1984); both must give the same energy-mode result as the
    recipe's constants where the parameters agree (the suction case; both use the default
    solids heat capacity), and run with fractions."""
    rec = recipe(tmp_path, physics="physics: {mode: energy}\n")
    src = _physics_params_file(tmp_path, (("por", 0.451, "1"), ("psi", -478.0, "mm H2O"), ("bexp", 5.39, "1")))
    lay = _layout_with(tmp_path, "  porosity: por\n  psi_sat: psi\n  clapp_b: bexp")
    a = api.apply(rec, src, tmp_path / "a.nc", layout=lay)
    tex = recipe(tmp_path, physics="physics: {mode: energy, porosity: 0.451, psi_sat_m: 0.478, clapp_b: 5.39}\n")
    tex_path = tmp_path / "tex.yaml"
    tex_path.write_text(tex.read_text())
    b = api.apply(tex_path, src, tmp_path / "b.nc", layout=LAYOUTS / "gridded-layered.yaml")
    assert a["ledger"]["physics"]["frozen_region_total_kg"] == pytest.approx(
        b["ledger"]["physics"]["frozen_region_total_kg"], rel=1e-5)
    # a suction without units is refused, naming the variable
    with netCDF4.Dataset(src, "a") as ds:
        ds["psi"].delncattr("units")
    with pytest.raises(Exception, match="'psi'.*no units attribute"):
        api.apply(rec, src, tmp_path / "c.nc", layout=lay)
    # only some of the three parameters named: refused
    with pytest.raises(Exception, match="names porosity but not clapp_b, psi_sat"):
        api.apply(rec, src, tmp_path / "d.nc", layout=_layout_with(tmp_path, "  porosity: por"))


def test_file_sand_clay_as_fractions_with_missing_cells(tmp_path):
    rec = recipe(tmp_path, physics="physics: {mode: energy}\n")
    src = _physics_params_file(tmp_path, (("sandf", 0.4, "1"), ("clayf", 0.2, "1")))
    lay = _layout_with(tmp_path, "  sand: sandf\n  clay: clayf")
    pct = tmp_path / "pct.yaml"
    pct.write_text(recipe(tmp_path, physics="physics: {mode: energy, sand_pct: 40, clay_pct: 20}\n").read_text())
    a = api.apply(rec, src, tmp_path / "a.nc", layout=lay)
    b = api.apply(pct, src, tmp_path / "b.nc", layout=LAYOUTS / "gridded-layered.yaml")
    assert a["ledger"]["variables"]["soil_t"] == b["ledger"]["variables"]["soil_t"]


def test_region_totals_are_over_land_area(tmp_path):
    """Soil water and energy are per m2 of land: totals use cell area x land fraction."""
    totals = []
    for frac in (1.0, 0.4):
        folder = tmp_path / f"f{frac}"
        folder.mkdir()
        gridded_file(folder / "g.nc", (("soil_t", 274.0, "K"), ("soil_liq", 0.30, "m3 m-3"),
                                       ("soil_ice", 0.0, "m3 m-3")))
        with netCDF4.Dataset(folder / "g.nc", "a") as ds:
            ds["land_frac"][:] = np.full(ds["land_frac"].shape, frac)
        rec = folder / "r.yaml"
        rec.write_text(RECIPE.replace("taper_km: 0}", "taper_km: 0, use_land_fraction: false}")
                       .replace("TARGETS", "[soil_temperature]") + "physics: {mode: energy, texture: loam}\n")
        led = api.preview(rec, folder / "g.nc", layout=LAYOUTS / "gridded-layered.yaml")
        totals.append((led["physics"]["frozen_region_total_kg"], led["region"]["area_m2"]))
    f32 = float(np.float32(0.4))  # the file stores the fraction as float32
    assert totals[1][0] == pytest.approx(f32 * totals[0][0], rel=1e-9)
    assert totals[1][1] == pytest.approx(f32 * totals[0][1], rel=1e-9)


def test_round_off_negative_water_is_zeroed_and_counted(tmp_path):
    gridded_file(tmp_path / "g.nc", (("soil_t", 274.0, "K"), ("soil_liq", 0.30, "m3 m-3"),
                                     ("soil_ice", -1e-12, "m3 m-3")))
    rec = recipe(tmp_path, physics="physics: {mode: energy, texture: loam}\n")
    led = api.preview(rec, tmp_path / "g.nc", layout=LAYOUTS / "gridded-layered.yaml")
    assert led["clamps"]["soil_ice_rounding_negative_to_zero"] > 0


def test_soil_parameters_out_of_range_and_phase_change_against_a_warming(tmp_path):
    from initgen.cli import main

    # psi_sat stored in mm but labelled m: 478 m is no soil's suction (Clapp and Hornberger 1978
    # list 0.09..0.79 m): refused, naming the variable
    rec = recipe(tmp_path, physics="physics: {mode: energy}\n")
    src = _physics_params_file(tmp_path, (("por", 0.451, "1"), ("psi", 478.0, "m"), ("bexp", 5.39, "1")))
    lay = _layout_with(tmp_path, "  porosity: por\n  psi_sat: psi\n  clapp_b: bexp")
    with pytest.raises(Exception, match="'psi' \\(psi_sat, units 'm'\\).*outside 0.0001..10"):
        api.preview(rec, src, layout=lay)
    # 0.30 liquid at 271 K lies far above sand's supercooled limit (Niu and Yang 2006): the
    # equilibrium rule diagnoses the split at 271 K first, freezing water under a warming; the
    # ledger counts it per layer as acted on, and a warning says so
    warm = tmp_path / "warm.yaml"
    warm.write_text(RECIPE.replace("constant_K: -2.0", "constant_K: 0.01").replace("TARGETS", "[soil_temperature]")
                    + "physics: {mode: temperature, texture: sand, phase_rule: equilibrium}\n")
    gridded_file(tmp_path / "w.nc", (("soil_t", 271.0, "K"), ("soil_liq", 0.30, "m3 m-3"),
                                     ("soil_ice", 0.0, "m3 m-3")))
    with pytest.warns(UserWarning, match="would freeze .* kg.*equilibrium re-balances them"):
        led = api.preview(warm, tmp_path / "w.nc", layout=LAYOUTS / "gridded-layered.yaml")
    shift = led["input_phase_disequilibrium"]
    assert shift["acted_on"] and sum(shift["equilibrium_rule_would_freeze_kg_per_layer"]) > 0
    assert led["variables"]["soil_liq"]["layers"][0]["max"] < 0      # the liquid went down
    # the change-driven rule leaves the input's state alone and reports it
    warm.write_text(warm.read_text().replace(", phase_rule: equilibrium", ""))
    with pytest.warns(UserWarning, match="not in phase equilibrium.*leaves them as they are"):
        led = api.preview(warm, tmp_path / "w.nc", layout=LAYOUTS / "gridded-layered.yaml")
    assert "phase_change_against_imposed_change" not in led["flags"]
    assert led["physics"]["frozen_region_total_kg"] == 0
    bad = tmp_path / "bad.yaml"
    bad.write_text(recipe(tmp_path, physics="physics: {mode: energy, sand_pct: 70, clay_pct: 50}\n").read_text())
    assert main(["check", str(bad)]) == 2


def test_check_refuses_bad_file_soil_parameters_before_anything_is_written(tmp_path, capsys):
    from initgen.cli import main

    rec = recipe(tmp_path, physics="physics: {mode: energy}\n")
    src = _physics_params_file(tmp_path, (("por", 45.0, "1"), ("psi", 0.478, "m"), ("bexp", 5.39, "1")))
    lay = _layout_with(tmp_path, "  porosity: por\n  psi_sat: psi\n  clapp_b: bexp")
    argv = ["-l", str(lay), "-i", str(src)]
    assert main(["check", str(rec)] + argv) == 2
    assert "'por' (porosity" in capsys.readouterr().err
    assert main(["apply", str(rec)] + argv + ["-o", str(tmp_path / "o.nc")]) == 2
    assert not (tmp_path / "o.nc").exists()


def test_file_sand_without_units_is_refused_naming_the_layout_key(tmp_path):
    """Percent or fraction is read from the units alone: values cannot tell (a low-clay block
    looks like fractions), so a sand variable without units is refused, naming units.sand."""
    rec = recipe(tmp_path, physics="physics: {mode: energy}\n")
    src = _physics_params_file(tmp_path, (("sandf", 40.0, ""), ("clayf", 0.2, "1")))
    lay = _layout_with(tmp_path, "  sand: sandf\n  clay: clayf")
    with pytest.raises(Exception, match="'sandf' \\(sand\\).*units.sand"):
        api.preview(rec, src, layout=lay)
