"""End-to-end checks of the core pipeline: recipe + layout -> perturbed copy + provenance."""

from __future__ import annotations

import hashlib
import json
import math
from contextlib import nullcontext

import netCDF4
import numpy as np
import pytest
import xarray as xr

import initgen
from initgen import api
from initgen.science import geodesy
from initgen.cli import main
from initgen.config.recipe import load_recipe

from filemaker import FILL, NODES, curvilinear, points, regular
from clikit import read_raw
from clikit import sha
from clikit import box_recipe_text
from clikit import recipe as write_recipe


def box_recipe(tmp_path, w=20, e=80, s=10, n=50, a=-2.0, kind="uniform", extra=""):
    return write_recipe(tmp_path, box_recipe_text(w, e, s, n, anomaly_K=a, profile=f"kind: {kind}{extra}"))


def test_regular_grid_changes_only_land_cells_in_box(tmp_path):
    src = regular(tmp_path / "in.nc")
    rec = box_recipe(tmp_path)
    before = sha(src)
    out = tmp_path / "out.nc"
    api.apply(rec, src, out)
    assert sha(src) == before  # the input is never modified
    a, b = read_raw(src, "tsoil"), read_raw(out, "tsoil")
    with netCDF4.Dataset(src) as ds:
        lon, lat = ds["lon"][:], ds["lat"][:]
    LON, LAT = np.meshgrid(lon, lat)
    inside = (LON > 20) & (LON < 80) & (LAT > 10) & (LAT < 50)
    diff = (b != a)[0]  # (lev, lat, lon)
    assert diff.any()
    assert not diff[:, ~inside].any()
    land = a[0, 0] != FILL
    assert np.all(diff[:, inside & land])
    np.testing.assert_allclose((b - a)[0][:, inside & land], -2.0, atol=1e-4)
    # fill values stay fill values
    assert np.all(b[0][:, ~land] == FILL)


def test_untouched_variables_and_attributes_identical(tmp_path):
    src = regular(tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    api.apply(box_recipe(tmp_path), src, out)
    with netCDF4.Dataset(src) as A, netCDF4.Dataset(out) as B:
        assert A.data_model == B.data_model
        assert set(A.variables) == set(B.variables)
        for name in A.variables:
            va, vb = A[name], B[name]
            assert va.dimensions == vb.dimensions and va.dtype == vb.dtype
            assert {k: str(va.getncattr(k)) for k in va.ncattrs()} == {k: str(vb.getncattr(k)) for k in vb.ncattrs()}
            assert va.chunking() == vb.chunking() and va.filters() == vb.filters()
            if name != "tsoil":
                assert np.array_equal(read_raw(src, name), read_raw(out, name))
        ga = {k: A.getncattr(k) for k in A.ncattrs() if k != "history"}
        gb = {k: B.getncattr(k) for k in B.ncattrs() if k != "history"}
        assert ga == gb


def test_history_line_and_provenance_hashes(tmp_path):
    src = regular(tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    rec = box_recipe(tmp_path)
    record = api.apply(rec, src, out)
    prov = json.loads((tmp_path / "out.nc.provenance.json").read_text())
    assert prov == json.loads(json.dumps(record))
    assert prov["input"]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
    assert prov["output"]["sha256"] == hashlib.sha256(out.read_bytes()).hexdigest()
    assert prov["input"]["size_bytes"] == src.stat().st_size
    assert prov["recipe"]["sha256"] == load_recipe(rec).sha256
    assert prov["recipe"]["text"] == rec.read_text()
    for k in ("initgen", "numpy", "xarray", "netCDF4", "netcdf-c", "hdf5"):
        assert prov["versions"][k]
    with netCDF4.Dataset(out) as ds:
        hist = ds.history.splitlines()
    # CF convention: the newest step first, the earlier history kept below it
    assert hist[0].startswith(prov["started_utc"]) and "initgen" in hist[0] and load_recipe(rec).sha256 in hist[0]
    assert hist[1] == "made by the initgen test suite"
    layer0 = prov["ledger"]["variables"]["tsoil"]["layers"][0]
    assert layer0["cells_changed"] > 0
    assert layer0["min"] == pytest.approx(-2.0, abs=1e-4) and layer0["max"] == pytest.approx(-2.0, abs=1e-4)


def test_packed_int16_round_trip(tmp_path):
    src = regular(tmp_path / "in.nc", packed=True)
    out = tmp_path / "out.nc"
    api.apply(box_recipe(tmp_path, a=-1.5), src, out)
    a, b = read_raw(src, "tsoil"), read_raw(out, "tsoil")
    assert b.dtype == np.int16
    changed = a != b
    # -1.5 K at scale 0.01 is exactly -150 counts (NetCDF User Guide packing convention)
    assert np.all((b - a)[changed] == -150)
    assert np.all(b[a == -32767] == -32767)


def test_netcdf3_stays_netcdf3(tmp_path):
    for fmt in ("NETCDF3_CLASSIC", "NETCDF3_64BIT_OFFSET"):
        src = regular(tmp_path / f"in-{fmt}.nc", fmt=fmt)
        out = tmp_path / f"out-{fmt}.nc"
        api.apply(box_recipe(tmp_path), src, out)
        with netCDF4.Dataset(out) as ds:
            assert ds.data_model == fmt
        assert np.array_equal(read_raw(src, "other"), read_raw(out, "other"))


def test_per_layer_variables_and_layer_last(tmp_path):
    src = regular(tmp_path / "in.nc", per_layer=True)
    layout = write_recipe(tmp_path, """
initgen_layout: 1
roles:
  longitude: lon
  latitude: lat
  land_fraction: landfrac
  soil_temperature: [tsoil1, tsoil2, tsoil3, tsoil4, tsoil5]
  layer_node_depth: {values: [5, 15, 35, 75, 150], units: cm}
""", "layout.yaml")
    rec = box_recipe(tmp_path, kind="exponential", extra=", efolding_m: 0.5")
    out = tmp_path / "out.nc"
    api.apply(rec, src, out, layout=layout)
    ratios = []
    for k in range(5):
        d = read_raw(out, f"tsoil{k + 1}") - read_raw(src, f"tsoil{k + 1}")
        ratios.append(d[d != 0].mean())
    # f(z) = exp(-z / e) at the node depths (definition of the exponential profile)
    np.testing.assert_allclose(ratios, -2.0 * np.exp(-NODES / 0.5), atol=3e-5)  # float32 ulp at 275 K is 3e-5
    src2 = regular(tmp_path / "in2.nc", layer_first=False)
    out2 = tmp_path / "out2.nc"
    api.apply(rec, src2, out2)
    d2 = read_raw(out2, "tsoil") - read_raw(src2, "tsoil")
    got = [d2[0][..., k][d2[0][..., k] != 0].mean() for k in range(5)]
    np.testing.assert_allclose(got, -2.0 * np.exp(-NODES / 0.5), atol=3e-5)


def test_three_grid_kinds_give_same_change(tmp_path):
    """A regular grid, the same points as a curvilinear grid and as a list of columns."""
    src = regular(tmp_path / "reg.nc", ocean_fill=False)
    with netCDF4.Dataset(src) as ds:
        lon, lat = ds["lon"][:], ds["lat"][:]
        T = np.array(ds["tsoil"][0])
    LON, LAT = np.meshgrid(lon, lat)
    cur = curvilinear(tmp_path / "cur.nc", LON, LAT, T)
    pts = points(tmp_path / "pts.nc", LON.ravel(), LAT.ravel(), T.reshape(T.shape[0], -1))
    rec = box_recipe(tmp_path, w=-40, e=60, s=-30, n=35, kind="exponential", extra=", efolding_m: 0.3")
    outs = {}
    for name, f in (("reg", src), ("cur", cur), ("pts", pts)):
        outs[name] = tmp_path / f"{name}.out.nc"
        with pytest.warns(UserWarning) if name != "reg" else nullcontext():
            api.apply(rec, f, outs[name])
    dreg = (read_raw(outs["reg"], "tsoil") - read_raw(src, "tsoil"))[0]
    dcur = read_raw(outs["cur"], "tsoil") - read_raw(cur, "tsoil")
    dpts = read_raw(outs["pts"], "tsoil") - read_raw(pts, "tsoil")
    assert np.count_nonzero(dreg) > 0
    np.testing.assert_array_equal(dreg, dcur)
    np.testing.assert_array_equal(dreg.reshape(dreg.shape[0], -1), dpts.T)


def test_longitude_conventions_give_same_result(tmp_path):
    a = regular(tmp_path / "a.nc", lon0=0.0)
    b = regular(tmp_path / "b.nc", lon0=-180.0)
    rec = box_recipe(tmp_path, w=160, e=-160, s=-40, n=40)  # crosses the 180 degree meridian
    api.apply(rec, a, tmp_path / "a.out.nc")
    api.apply(rec, b, tmp_path / "b.out.nc")
    da = (read_raw(tmp_path / "a.out.nc", "tsoil") - read_raw(a, "tsoil"))[0]
    db = (read_raw(tmp_path / "b.out.nc", "tsoil") - read_raw(b, "tsoil"))[0]
    with netCDF4.Dataset(a) as ds:
        lona = ds["lon"][:]
    with netCDF4.Dataset(b) as ds:
        lonb = ds["lon"][:]
    # reorder b's columns onto a's longitudes
    order = np.argsort(np.mod(lonb, 360.0))
    assert np.allclose(np.mod(lonb[order], 360), lona)
    changed_a = da != 0
    assert changed_a.any()
    np.testing.assert_array_equal(changed_a, (db != 0)[..., order])


def test_cell_areas_sum_to_sphere():
    """Regular 1-degree global grid: areas sum to 4 pi R^2, R = 6371.0 km (IUGG mean Earth radius)."""
    lon = np.arange(0.5, 360, 1.0)
    lat = np.arange(-89.5, 90, 1.0)
    area = geodesy.cell_areas_regular(lon, lat)
    R = 6371.0e3  # m, IUGG mean Earth radius (Moritz 2000)
    assert area.sum() == pytest.approx(4 * math.pi * R**2, rel=1e-6)


def test_perturb_in_memory_equals_file_path(tmp_path):
    src = regular(tmp_path / "in.nc")
    rec = box_recipe(tmp_path, kind="exponential", extra=", efolding_m: 0.4")
    out = tmp_path / "out.nc"
    record = api.apply(rec, src, out)
    with xr.open_dataset(src) as ds:
        new, led = initgen.perturb(ds.load(), rec)
    with xr.open_dataset(out) as ds_out:
        np.testing.assert_array_equal(new["tsoil"].values, ds_out["tsoil"].values)
    assert led["variables"]["tsoil"] == record["ledger"]["variables"]["tsoil"]


def test_region_covering_whole_grid(tmp_path):
    src = regular(tmp_path / "in.nc")
    rec = box_recipe(tmp_path, w=-180, e=180, s=-90, n=90, a=1.0)
    out = tmp_path / "out.nc"
    api.apply(rec, src, out)
    a, b = read_raw(src, "tsoil"), read_raw(out, "tsoil")
    land = a != FILL
    np.testing.assert_allclose((b - a)[land], 1.0, atol=1e-4)


def test_blocks_are_bounded_and_match_single_block(tmp_path, monkeypatch):
    from initgen.engine import tiling

    src = regular(tmp_path / "in.nc", nlon=72, nlat=36, chunked=True)
    rec = box_recipe(tmp_path, kind="exponential", extra=", efolding_m: 0.4")
    api.apply(rec, src, tmp_path / "big.nc")
    monkeypatch.setattr(tiling, "BLOCK_ELEMENTS", 50)
    api.apply(rec, src, tmp_path / "small.nc")
    np.testing.assert_array_equal(read_raw(tmp_path / "big.nc", "tsoil"), read_raw(tmp_path / "small.nc", "tsoil"))


def test_cli_apply_check_exit_codes(tmp_path, capsys):
    src = regular(tmp_path / "in.nc")
    rec = box_recipe(tmp_path)
    assert main(["check", str(rec)]) == 0
    assert "sha256" in capsys.readouterr().out
    assert main(["check", str(rec), "--input", str(src)]) == 0
    out = tmp_path / "o.nc"
    assert main(["apply", str(rec), "--input", str(src), "--output", str(out), "-q"]) == 0
    assert main(["apply", str(rec), "--input", str(src), "--output", str(out), "-q"]) == 2
    assert "--force" in capsys.readouterr().err
    assert main(["apply", str(rec), "--input", str(src), "--output", str(out), "-q", "--force"]) == 0
    assert main(["apply", str(rec), "--input", str(src), "--output", str(src)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "input" in err


def test_version(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert initgen.__version__ in capsys.readouterr().out


def test_region_across_the_grid_seam_reads_two_slabs_not_the_globe(tmp_path, monkeypatch):
    """A box across 0 degrees on a 0..360 grid touches two runs of longitude indices."""
    from initgen.engine import plan as plan_mod
    from initgen.engine import tiling
    from initgen.io.grid import open_model
    from initgen.config.recipe import load_recipe
    from initgen.io.stores import NetCDFStore

    src = regular(tmp_path / "in.nc", nlon=72, nlat=36, lon0=0.0, chunked=True)
    rec = load_recipe(box_recipe(tmp_path, w=-20, e=20, s=-30, n=30))
    store = NetCDFStore(src)
    try:
        p = plan_mod.build_plan(rec, open_model(store))
        lon_idx = p.window[1]
        assert lon_idx.size < 72 // 2  # the window is not the whole globe
        slabs = tiling.slabs(p)
        assert len(slabs) == 2
        spans = sorted((h["lon"].start, h["lon"].stop) for h, _ in slabs)
        assert spans[0][0] == 0 and spans[1][1] == 72
        # tiny blocks tile each slab exactly, cut at the 6 x 6 chunk boundaries of the file
        monkeypatch.setattr(tiling, "BLOCK_ELEMENTS", 40)
        for slab in slabs:
            blocks = tiling.blocks_of(p, slab)
            cells = sum((h["lat"].stop - h["lat"].start) * (h["lon"].stop - h["lon"].start) for h, _ in blocks)
            h0 = slab[0]
            assert cells == (h0["lat"].stop - h0["lat"].start) * (h0["lon"].stop - h0["lon"].start)
            for h, w in blocks:
                assert (h["lat"].stop - h["lat"].start) == (w[0].stop - w[0].start)
                for d in ("lat", "lon"):
                    assert h[d].start % 6 == 0 or h[d].start == h0[d].start
    finally:
        store.close()
