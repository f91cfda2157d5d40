"""Layer geometry from every source a file or layout gives, CF detection of per-layer
variables, record axes, cell areas and separate grid files (issue 14), each on a file of its
shape made by ``tests/filemaker.py``.

External references used here:
- layer-mean factor: the mean of f(z) over [top, bottom] computed with scipy.integrate.quad
  (numerical integration, independent of initgen's closed forms);
- cell areas: pyproj.Geod.polygon_area_perimeter on a sphere of R = 6371.0 km (Karney 2013,
  "Algorithms for geodesics", J. Geodesy 87, 43-55), Girard's theorem for a spherical triangle
  (an octant has area 4 pi R^2 / 8), and the area of a lat-lon cell R^2 dlon (sin lat2 - sin lat1)
  (Snyder 1987, USGS Professional Paper 1395, pp. 76-85).
"""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import netCDF4
import numpy as np
import pytest
from scipy.integrate import quad

import filemaker as fm
from clikit import LAYOUTS, ROOT, read_raw
from initgen import api
from initgen.science import geodesy
from initgen.errors import InputError, InputWarning

R_M = geodesy.EARTH_RADIUS_KM * 1.0e3

RECIPE = """initgen_recipe: 1
name: geometry-test
perturbations:
  - name: box
    region: {include: [{box: {lon: [BOXLON], lat: [-80, 80]}}], taper_km: TAPER, use_land_fraction: false}
    anomaly: {constant_K: ANOM}
    profile: {kind: exponential, efolding_m: EFOLD, evaluate: layer_mean}
    targets: [soil_temperature]
"""


def recipe(folder, anom=-2.0, efold=0.5, taper=0, boxlon="-180, 180", extra=""):
    p = Path(folder) / "r.yaml"
    p.write_text(RECIPE.replace("ANOM", repr(anom)).replace("EFOLD", repr(efold)).replace("TAPER", str(taper))
                 .replace("BOXLON", boxlon) + extra)
    return p


def raw(path, name):
    return read_raw(path, name, np.float64)


def quad_mean(efold, top, bottom):
    """Mean of exp(-z/e) over [top, bottom] by numerical quadrature (scipy.integrate.quad)."""
    return quad(lambda z: np.exp(-z / efold), top, bottom)[0] / (bottom - top)


# ------------------------------------------------------------------------------ layer geometry


@pytest.mark.parametrize("as_dims", [False, True], ids=["scalar-coordinate", "length-1-depth-axis"])
def test_per_layer_cf_depth_bounds_run_with_no_layout(tmp_path, as_dims):
    src = fm.per_layer_cf_bounds(tmp_path / "in.nc", as_dims=as_dims)
    rec = recipe(tmp_path)
    res = api.check(rec, None, src)
    lay = res.model.layers
    np.testing.assert_allclose(lay.interfaces_m, fm.GEOM_INTERFACES, atol=1e-6)
    # written to the file in the order c, a, d, b: detection orders them by depth
    assert res.model.role("soil_temperature").variables == ["st_a", "st_b", "st_c", "st_d"]
    text = res.summary()
    assert "CF bounds 'depth1_bnds'" in text and "layer 3: 1..2, 1" in text
    assert "role soil_temperature: from CF standard_name soil_temperature (4 per-layer variables" in text
    api.apply(rec, src, tmp_path / "out.nc")
    for k, name in enumerate(["st_a", "st_b", "st_c", "st_d"]):
        d = raw(tmp_path / "out.nc", name) - raw(src, name)
        expect = -2.0 * quad_mean(0.5, fm.GEOM_INTERFACES[k], fm.GEOM_INTERFACES[k + 1])
        np.testing.assert_allclose(d[raw(src, name) != fm.FILL], expect, atol=1e-4)


def test_per_layer_cf_depth_bounds_layout_for_variables_without_standard_name(tmp_path):
    src = fm.per_layer_cf_bounds(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        for name in ("st_a", "st_b", "st_c", "st_d"):
            ds[name].delncattr("standard_name")
    with pytest.raises(InputError, match="could not find role.*soil_temperature"):
        api.check(recipe(tmp_path), None, src)
    res = api.check(recipe(tmp_path), LAYOUTS / "per-layer-cf-depth-bounds.yaml", src)
    np.testing.assert_allclose(res.model.layers.interfaces_m, fm.GEOM_INTERFACES, atol=1e-6)
    np.testing.assert_allclose(res.model.layers.node_m, 0.5 * (fm.GEOM_INTERFACES[1:] + fm.GEOM_INTERFACES[:-1]),
                               atol=1e-6)
    assert "node from CF scalar depth coordinate 'depth2' of st_c" in res.summary()


def test_per_layer_depths_in_names_run_with_no_layout(tmp_path):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc")
    res = api.check(recipe(tmp_path), None, src)
    np.testing.assert_allclose(res.model.layers.interfaces_m, fm.GEOM_INTERFACES, atol=1e-12)
    assert res.model.role("soil_temperature").variables[0] == "soil_temperature_0_10cm"
    assert "the depth range in the name of soil_temperature_10_40cm" in res.summary()
    # the shipped layout naming them gives the same geometry
    res2 = api.check(recipe(tmp_path), LAYOUTS / "per-layer-depths-in-names.yaml", src)
    assert res2.model.layers == res.model.layers


def test_name_and_long_name_that_disagree_are_refused(tmp_path):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        ds["soil_temperature_10_40cm"].long_name = "soil temperature 10-50 cm"
    with pytest.raises(InputError, match="soil_temperature_10_40cm.*disagree"):
        api.check(recipe(tmp_path), None, src)


def test_nodes_and_thickness_layout_keeps_the_thickness(tmp_path):
    src = fm.nodes_and_thickness(tmp_path / "in.nc")
    lay = LAYOUTS / "node-depths-and-thickness.yaml"
    res = api.check(recipe(tmp_path), lay, src)
    # interfaces are the stacked thicknesses 0.1, 0.3, 0.6, 1.0 m, not halfway between nodes
    np.testing.assert_allclose(res.model.layers.interfaces_m, [0.0, 0.1, 0.4, 1.0, 2.0], atol=1e-6)
    np.testing.assert_allclose(res.model.layers.node_m, [0.05, 0.25, 0.7, 1.5], atol=1e-6)
    assert "thicknesses from layout roles.layer_thickness (variable dz)" in res.summary()
    api.apply(recipe(tmp_path), src, tmp_path / "out.nc", layout=lay)
    d = raw(tmp_path / "out.nc", "tsoil") - raw(src, "tsoil")
    for k, (a, b) in enumerate([(0, .1), (.1, .4), (.4, 1.), (1., 2.)]):
        np.testing.assert_allclose(d[k][raw(src, "tsoil")[k] != fm.FILL], -2.0 * quad_mean(0.5, a, b), atol=1e-4)


def test_node_outside_its_layer_is_refused_naming_both(tmp_path):
    src = fm.nodes_and_thickness(tmp_path / "in.nc", thickness=(0.1, 0.1, 0.6, 1.0))
    with pytest.raises(InputError, match=r"node of layer 1 at 0\.25 m by .*\(variable layer\) lies outside .*\(variable dz\)"):
        api.check(recipe(tmp_path), LAYOUTS / "node-depths-and-thickness.yaml", src)


def test_thicknesses_that_do_not_sum_to_the_interfaces_are_refused(tmp_path):
    src = fm.layered_with_records(tmp_path / "in.nc", 1)
    lay = tmp_path / "l.yaml"
    lay.write_text("initgen_layout: 1\nroles: {layer_thickness: {values: [0.1, 0.3, 0.5, 1.0], units: m}}\n")
    with pytest.raises(InputError, match=r"layer 2 is 0\.5 m thick by layout roles\.layer_thickness.*lev_bnds.*do not sum"):
        api.check(recipe(tmp_path), lay, src)


def test_node_only_file_is_never_given_guessed_interfaces(tmp_path):
    src = fm.regular(tmp_path / "in.nc")  # a layer axis of node depths, no bounds
    with pytest.raises(InputError, match="only node depths are known.*midpoints_between_nodes"):
        api.check(recipe(tmp_path), None, src)  # layer_mean needs the interfaces
    node_rec = tmp_path / "n.yaml"
    node_rec.write_text(recipe(tmp_path).read_text().replace("evaluate: layer_mean", "evaluate: node"))
    res = api.check(node_rec, None, src)
    assert not res.model.layers.interfaces_known
    assert "unknown..unknown" in res.summary()
    # asked for by name, the midpoint construction is used and said
    res = api.check(recipe(tmp_path), LAYOUTS / "node-depths-midpoint-interfaces.yaml", src)
    np.testing.assert_allclose(res.model.layers.interfaces_m, [0, 0.1, 0.25, 0.55, 1.125, 1.875], atol=1e-6)
    assert "layout asks midpoints_between_nodes" in res.summary()


def test_layer_top_bottom_attributes(tmp_path):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc", long_names=False)
    with netCDF4.Dataset(src, "a") as ds:
        for a, b in [(0, 10), (10, 40), (40, 100), (100, 200)]:
            v = ds[f"soil_temperature_{a}_{b}cm"]
            v.layer_top, v.layer_bottom, v.depth_units = float(a), float(b), "cm"
    res = api.check(recipe(tmp_path), None, src)
    assert "attributes layer_top/layer_bottom of soil_temperature_0_10cm" in res.summary()
    np.testing.assert_allclose(res.model.layers.interfaces_m, fm.GEOM_INTERFACES, atol=1e-12)
    with netCDF4.Dataset(src, "a") as ds:
        ds["soil_temperature_40_100cm"].layer_bottom = 90.0
    with pytest.raises(InputError, match=r"layer 2 is 0\.4\.\.0\.9 m by attributes layer_top/layer_bottom .* but 0\.4\.\.1 m by the depth range in the name"):
        api.check(recipe(tmp_path), None, src)


# ------------------------------------------------------------------------------ CF roles


def test_two_candidates_for_one_role_are_refused_naming_both(tmp_path):
    src = fm.regular(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        v = ds.createVariable("landfrac2", "f4", ("lat", "lon"))
        v.units, v.standard_name = "1", "land_area_fraction"
        v[:] = 1.0
    with pytest.raises(InputError, match="two candidates for role land_fraction: 'landfrac' and 'landfrac2'"):
        api.check(_node_recipe(tmp_path), None, src)
    # a layout naming the role settles it, and CF detection still fills in the others
    lay = tmp_path / "l.yaml"
    lay.write_text("initgen_layout: 1\nroles: {land_fraction: landfrac2}\n")
    res = api.check(_node_recipe(tmp_path), lay, src)
    assert res.model.role("land_fraction").variables == ["landfrac2"]
    assert res.model.role("soil_temperature").variables == ["tsoil"]
    text = res.summary()
    assert "role land_fraction: from layout roles.land_fraction" in text
    assert "role soil_temperature: from CF standard_name soil_temperature" in text


def _node_recipe(folder):
    p = Path(folder) / "node.yaml"
    p.write_text(recipe(folder).read_text().replace("evaluate: layer_mean", "evaluate: node"))
    return p


# ------------------------------------------------------------------------------ records


def test_single_record_time_axis_reads_perturbs_writes(tmp_path):
    src = fm.layered_with_records(tmp_path / "in.nc", 1)
    led = api.preview(recipe(tmp_path), src)
    rows = led["variables"]["tsoil"]["layers"]
    assert len(rows) == 4 and rows[0]["cells_changed"] == 72
    api.apply(recipe(tmp_path), src, tmp_path / "out.nc")
    d = raw(tmp_path / "out.nc", "tsoil") - raw(src, "tsoil")
    assert d.shape == (1, 4, 6, 12)
    np.testing.assert_allclose(d[0, 0], -2.0 * quad_mean(0.5, 0.0, 0.1), atol=1e-4)


def test_several_records_are_refused(tmp_path):
    src = fm.layered_with_records(tmp_path / "in.nc", 2)
    with pytest.raises(InputError, match="'tsoil' .* has 2 records along 'time'"):
        api.check(recipe(tmp_path), None, src)
    src2 = fm.per_layer_cf_bounds(tmp_path / "in2.nc", nrec=2)
    with pytest.raises(InputError, match="has 2 records along 'time'"):
        api.check(recipe(tmp_path), None, src2)


# ------------------------------------------------------------------------------ cell areas


def test_octant_area_girard():
    # Girard's theorem: the triangle (0E,0N), (90E,0N), (0E,90N) has angle sum 3 pi/2, area pi R^2 / 2;
    # a degenerate fourth corner repeats the first
    a = geodesy.spherical_polygon_area_m2([0.0, 90.0, 0.0, 0.0], [0.0, 0.0, 90.0, 0.0])
    assert a == pytest.approx(np.pi * R_M**2 / 2, rel=1e-12)


def test_curvilinear_corner_areas_match_pyproj(tmp_path):
    pyproj = pytest.importorskip("pyproj")
    src, (lon_c, lat_c) = fm.curvilinear_corners(tmp_path / "c.nc")
    res = api.check(_node_recipe(tmp_path), LAYOUTS / "curvilinear-cell-corners.yaml", src)
    area = res.model.grid.area
    geod = pyproj.Geod(a=R_M, b=R_M)
    for j, i in [(0, 0), (2, 5), (5, 7)]:
        lons = [lon_c[j, i], lon_c[j, i + 1], lon_c[j + 1, i + 1], lon_c[j + 1, i]]
        lats = [lat_c[j, i], lat_c[j, i + 1], lat_c[j + 1, i + 1], lat_c[j + 1, i]]
        ref, _ = geod.polygon_area_perimeter(lons, lats)
        assert area[j, i] == pytest.approx(abs(ref), rel=1e-9)
    assert "CF cell corners lon_corners/lat_corners" in res.summary()


def test_regular_bounds_areas_match_the_lat_lon_cell_formula_and_pyproj(tmp_path):
    pyproj = pytest.importorskip("pyproj")
    path = tmp_path / "b.nc"
    with netCDF4.Dataset(path, "w") as ds:
        fm._lonlat_regular(ds, bounds=True)
        v = ds.createVariable("tsoil", "f4", ("lat", "lon"))
        v.units, v.standard_name = "K", "soil_temperature"
        v[:] = 280.0
    res = api.check(_uniform(tmp_path), None, path)
    area = res.model.grid.area
    # Snyder (1987): R^2 dlon (sin lat2 - sin lat1), here for the 30 x 30 degree cell at 60..90N
    assert area[5, 0] == pytest.approx(R_M**2 * np.radians(30.0) * (1 - np.sin(np.radians(60.0))), rel=1e-12)
    # the globe: 4 pi R^2
    assert area.sum() == pytest.approx(4 * np.pi * R_M**2, rel=1e-12)
    # pyproj on a sphere, parallels densified (a parallel is not a geodesic): converges to the same
    geod = pyproj.Geod(a=R_M, b=R_M)
    t = np.linspace(0.0, 1.0, 2001)
    w, e, s, n = -175.0, -145.0, 30.0, 60.0
    lons = np.concatenate([w + (e - w) * t, e + (w - e) * t])
    lats = np.concatenate([np.full(t.size, s), np.full(t.size, n)])
    ref, _ = geod.polygon_area_perimeter(lons, lats)
    assert area[4, 0] == pytest.approx(abs(ref), rel=1e-5)


def _uniform(folder):
    p = Path(folder) / "u.yaml"
    p.write_text(recipe(folder).read_text().replace("kind: exponential, efolding_m: 0.5, evaluate: layer_mean",
                                                     "kind: uniform"))
    return p


def test_points_without_areas_leave_totals_out(tmp_path):
    src = fm.points_dateline(tmp_path / "p.nc", water=True)
    rec = recipe(tmp_path, boxlon="160, -160", extra="physics: {mode: energy, texture: loam}\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        led = api.preview(rec, src)
    reg = led["region"]
    assert reg["area_m2"] is None and "not known" in reg["area_is"] and "points" in reg["area_is"]
    phys = led["physics"]
    assert phys["frozen_per_layer_kg_m2"][0] > 0  # water froze: there is something to total
    assert not [k for k in phys if "_total_" in k] and "no cell areas" in phys["totals_left_out"]
    text = api.ledger_text(led)
    assert "km2" not in text and "not known" in text and "totals in kg and J left out" in text
    assert led["variables"]["tsoil"]["layers"][0]["cells_changed"] == 40  # all across the dateline
    # the same points with a cell-area variable: totals are there again
    with netCDF4.Dataset(src, "a") as ds:
        a = ds.createVariable("carea", "f8", ("column",))
        a.units, a.standard_name = "m2", "cell_area"
        a[:] = 1.0e8
    led = api.preview(rec, src)
    assert led["region"]["area_m2"] == pytest.approx(40 * 1.0e8)
    assert led["physics"]["frozen_region_total_kg"] == pytest.approx(
        sum(led["physics"]["frozen_per_layer_kg_m2"]) * 40 * 1.0e8, rel=1e-9)


def test_curvilinear_without_corners_says_why(tmp_path):
    src, _ = fm.curvilinear_corners(tmp_path / "c.nc", corners=False)
    with pytest.warns(InputWarning, match="curvilinear grid without"):
        res = api.check(_node_recipe(tmp_path), None, src)
    assert res.model.grid.has_area is False
    assert "cell area: unknown: a curvilinear grid" in res.summary()


# ------------------------------------------------------------------------------ grid file


def test_separate_grid_file(tmp_path):
    restart, grid = fm.separate_grid(tmp_path / "restart.nc", tmp_path / "grid.nc")
    lay = shutil.copy(LAYOUTS / "separate-grid-file.yaml", tmp_path / "layout.yaml")
    rec = recipe(tmp_path, boxlon="-7, 7")
    res = api.check(rec, lay, restart)
    assert res.model.grid.kind == "curvilinear"
    np.testing.assert_allclose(res.model.grid.area, raw(grid, "garea"))
    assert "role longitude: from grid_file" in res.summary()
    assert "file layout.grid_file: " in res.summary()
    record = api.apply(rec, restart, tmp_path / "out.nc", layout=lay)
    assert "layout.grid_file" in str(record)
    d = raw(tmp_path / "out.nc", "tsoil") - raw(restart, "tsoil")
    inside = (raw(grid, "glon") >= -7) & (raw(grid, "glon") <= 7)
    assert np.all(d[:, ~inside] == 0) and np.all(d[0, inside] < -1.5)


def test_grid_file_of_another_shape_is_refused(tmp_path):
    restart, _ = fm.separate_grid(tmp_path / "restart.nc", tmp_path / "other.nc")
    fm.separate_grid(tmp_path / "r2.nc", tmp_path / "grid.nc", nx=6)
    lay = shutil.copy(LAYOUTS / "separate-grid-file.yaml", tmp_path / "layout.yaml")
    with pytest.raises(InputError, match="grid_file .*grid.nc has dimension 'x' of length 6.*length 7"):
        api.check(recipe(tmp_path), lay, restart)


def test_every_shipped_layout_is_valid_listed_in_readme_and_tested():
    from initgen.config.recipe import load_layout

    readme = (ROOT / "README.md").read_text()
    tests = "".join(p.read_text() for p in (ROOT / "tests").rglob("test_*.py"))
    for path in sorted(LAYOUTS.glob("*.yaml")):
        load_layout(path)
        assert f"`{path.name}`" in readme, f"{path.name} not listed in the README's layout section"
        assert f'"{path.name}"' in tests, f"{path.name} is not exercised by any test"


def test_per_layer_water_found_with_the_temperatures_and_checked_against_them(tmp_path):
    src = fm.per_layer_depths_in_names(tmp_path / "in.nc")
    with netCDF4.Dataset(src, "a") as ds:
        for a, b in [(40, 100), (0, 10), (100, 200), (10, 40)]:
            v = ds.createVariable(f"soil_liquid_{a}_{b}cm", "f4", ("lat", "lon"))
            v.units, v.standard_name = "kg m-2", "mass_content_of_liquid_water_in_soil_layer"
            v[:] = 10.0
    res = api.check(_node_recipe(tmp_path), None, src)
    assert res.model.role("soil_liquid").variables == ["soil_liquid_0_10cm", "soil_liquid_10_40cm",
                                                       "soil_liquid_40_100cm", "soil_liquid_100_200cm"]
    with netCDF4.Dataset(src, "a") as ds:
        ds.renameVariable("soil_liquid_100_200cm", "soil_liquid_100_250cm")
    with pytest.raises(InputError, match=r"role soil_liquid: layer 3 is 1\.\.2 m by the soil temperature's layers but "
                                         r"1\.\.2\.5 m by the depth range in the name of soil_liquid_100_250cm"):
        api.check(_node_recipe(tmp_path), None, src)


def test_tiles_one_recipe_one_region_one_record_per_tile(tmp_path):
    parts = fm.tiles(tmp_path, ntiles=3)
    lay = shutil.copy(LAYOUTS / "tiled-grid-files.yaml", tmp_path / "tiles.yaml")
    whole_lay = tmp_path / "whole.yaml"
    whole_lay.write_text(Path(LAYOUTS / "separate-grid-file.yaml").read_text()
                         .replace("path: grid.nc", "path: whole-grid.nc"))
    # a tapered region that straddles the tile edges
    rec = recipe(tmp_path, boxlon="5, 30", taper=800)
    w_whole, _, _ = api.weights(rec, tmp_path / "whole.nc", whole_lay)
    ws = [api.weights(rec, r, lay)[0] for r, _ in parts]
    # the tiles' weights, side by side, are the whole grid's: one region across the tiles
    np.testing.assert_array_equal(np.concatenate(ws, axis=1), w_whole)
    assert 0 < np.count_nonzero((w_whole > 0) & (w_whole < 1))
    records = [api.apply(rec, r, tmp_path / f"out{k}.nc", layout=lay) for k, (r, _) in enumerate(parts)]
    assert len(records) == 3 and all("layout.grid_file" in str(x) for x in records)
    assert str(tmp_path / "grid.tile2.nc") in str(records[1])
    # a restart whose name has no tile number is refused, naming the key
    shutil.copy(parts[0][0], tmp_path / "restart.nc")
    with pytest.raises(InputError, match="grid_file.tile_pattern"):
        api.check(rec, lay, tmp_path / "restart.nc")


def test_ledger_records_each_layer_geometry_and_says_fallbacks(tmp_path):
    restart, _ = fm.separate_grid(tmp_path / "restart.nc", tmp_path / "grid.nc")
    lay = shutil.copy(LAYOUTS / "separate-grid-file.yaml", tmp_path / "layout.yaml")
    led = api.preview(recipe(tmp_path, boxlon="-7, 7"), restart, lay)
    geom = led["grid"]["soil_layers"]
    assert [(g["top_m"], g["bottom_m"]) for g in geom] == [(0.0, 0.1), (0.1, 0.4), (0.4, 1.0), (1.0, 2.0)]
    assert "node from the layer middle (no node depth given)" in geom[0]["source"]
    assert "soil layer geometry: " in api.ledger_text(led)


def test_an_extra_non_record_axis_is_perturbed_entry_by_entry(tmp_path):
    src = fm.layered_with_records(tmp_path / "one.nc", 1)
    path = tmp_path / "in.nc"
    with netCDF4.Dataset(src) as a, netCDF4.Dataset(path, "w") as b:
        for d in ("lon", "lat", "lev", "nv2"):
            b.createDimension(d, len(a.dimensions[d]))
        b.createDimension("subgrid", 3)
        for name in ("lon", "lat", "lev", "lev_bnds"):
            v = b.createVariable(name, a[name].dtype, a[name].dimensions)
            v.setncatts({k: a[name].getncattr(k) for k in a[name].ncattrs()})
            v[:] = a[name][:]
        t = b.createVariable("tsoil", "f4", ("subgrid", "lev", "lat", "lon"))
        t.units, t.standard_name = "K", "soil_temperature"
        t[:] = np.stack([a["tsoil"][0] + s for s in range(3)])
    lay = tmp_path / "l.yaml"
    lay.write_text("initgen_layout: 1\nroles: {soil_temperature: tsoil}\nlayer_dimension: lev\n")
    api.apply(recipe(tmp_path), path, tmp_path / "out.nc", layout=lay)
    d = raw(tmp_path / "out.nc", "tsoil") - raw(path, "tsoil")
    for s in range(3):
        np.testing.assert_allclose(d[s, 0], -2.0 * quad_mean(0.5, 0.0, 0.1), atol=1e-4)
