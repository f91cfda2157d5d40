"""Reports: compare, verify, preview report and mask file.

Reference: these checks are against the project's own contracts (the ledger is the truth; apply
touches only what the recipe names; the CLI's exit codes 0 / 2 / 3) and against reference
libraries: hashlib for file identity, netCDF4 for the raw stored values, and matplotlib's own
image reader for the PNG figures. The files are synthetic fixtures (tests/filemaker.py and the
built-in demo), not reference data.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import matplotlib.image as mpimg
import netCDF4
import numpy as np
import pytest

from initgen import api
from initgen.reports import figures
from initgen.io.stores import NetCDFStore
from initgen.reports.common import _lon_arc
from initgen.reports.compare import compare
from initgen.reports.compare import compare_markdown
from initgen.reports.compare import compare_text
from initgen.reports.preview import preview_report
from initgen.reports.verify import verify
from initgen.reports.mask import write_mask
from initgen.science import blocks
from initgen.cli import main
from initgen.demo import write_demo_restart
from initgen.errors import InputError

from filemaker import curvilinear, points, regular
from clikit import read_raw
from clikit import sha
from clikit import box_recipe_text
from clikit import recipe as write_recipe
from clikit import RECIPES

RECIPE = RECIPES / "demo-cold-highland.yaml"

def box_recipe(folder: Path, w=20, e=80, s=10, n=50, taper=0) -> Path:
    return write_recipe(folder, box_recipe_text(w, e, s, n, taper_km=taper), "box.yaml")


def listing(folder: Path) -> set:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo restart, its perturbed copy and provenance record (made once for the module)."""
    d = tmp_path_factory.mktemp("demo")
    src = write_demo_restart(d / "in.nc")
    out = d / "out.nc"
    record = api.apply(RECIPE, src, out)
    return {"dir": d, "src": src, "out": out, "record": record,
            "prov": Path(str(out) + ".provenance.json")}


# ---------------------------------------------------------------------------------------------
# compare
# ---------------------------------------------------------------------------------------------


def test_compare_file_with_itself_exits_0(tmp_path, capsys):
    f = regular(tmp_path / "a.nc", chunked=True)
    assert main(["compare", str(f), str(f)]) == 0
    assert "identical" in capsys.readouterr().out
    res = compare(f, f)
    assert res["ok"] and res["identical"] and res["differences"] == [] and res["structure"] == []
    assert all(v["status"] == "identical" for v in res["variables"].values())
    json.dumps(res, allow_nan=False)  # JSON-serialisable


def test_compare_demo_allowed_variables_exit_0_else_3(demo, tmp_path, capsys):
    changed = sorted(demo["record"]["ledger"]["variables"])
    assert "tsoil" in changed
    args = ["compare", str(demo["src"]), str(demo["out"]), "--json", str(tmp_path / "c.json")]
    assert main(args + ["--allow", *changed]) == 0
    text = capsys.readouterr().out
    assert "OK" in text and "tsoil" in text
    res = json.loads((tmp_path / "c.json").read_text())
    assert res["ok"] and not res["identical"] and res["differences"] == []
    assert any("history" in s and "(allowed)" in s for s in res["structure"])
    assert sorted(n for n, v in res["variables"].items() if v["status"] != "identical") == changed
    # every changed cell count equals the ledger's (summed over layers), per variable
    for name in changed:
        rows = demo["record"]["ledger"]["variables"][name].get("layers") or \
            [demo["record"]["ledger"]["variables"][name]["field"]]
        v = res["variables"][name]
        assert v["cells_changed"] == sum(r["cells_changed"] for r in rows)
        if v.get("layers"):
            assert [r["cells_changed"] for r in v["layers"]] == [r["cells_changed"] for r in rows]
    assert main(args + ["--force"]) == 3  # c.json exists: replaced only with --force (output policy)
    out = capsys.readouterr().out
    assert "DIFFERENT" in out
    res = json.loads((tmp_path / "c.json").read_text())
    assert not res["ok"] and len(res["differences"]) == len(changed)
    assert main(args + ["--force", "--allow", *changed[1:]]) == 3  # one changed variable not allowed


def test_compare_finds_one_altered_value_with_count_and_box(tmp_path):
    a = regular(tmp_path / "a.nc")
    b = tmp_path / "b.nc"
    shutil.copy(a, b)
    with netCDF4.Dataset(a) as ds:
        lon, lat = ds["lon"][:], ds["lat"][:]
    # two cells of layer 2 of tsoil, at (lat index 12, lon index 3) and (lat 13, lon 5)
    with netCDF4.Dataset(b, "r+") as ds:
        v = ds["tsoil"]
        v.set_auto_maskandscale(False)
        v[0, 2, 12, 3] = v[0, 2, 12, 3] + np.float32(1.5)
        v[0, 2, 13, 5] = v[0, 2, 13, 5] - np.float32(0.5)
    res = compare(a, b)
    assert not res["ok"]
    t = res["variables"]["tsoil"]
    assert t["status"] == "differs" and t["cells_changed"] == 2
    assert t["layer_dim"] == "lev"
    assert [r["cells_changed"] for r in t["layers"]] == [0, 0, 2, 0, 0]
    assert t["max_abs_change"] == pytest.approx(1.5, abs=1e-4)
    assert t["bbox"]["lon"] == pytest.approx([lon[3], lon[5]])
    assert t["bbox"]["lat"] == pytest.approx([lat[12], lat[13]])
    assert t["bbox"]["horizontal_cells_changed"] == 2
    assert res["differences"] == ["variable 'tsoil': 2 of 3240 values changed, largest |change| 1.5 K"]
    # equal weights would give (1.5 - 0.5) / 2; area weights favour the cell nearer the equator
    assert t["area_weighted_mean_change"] != pytest.approx(0.5, abs=1e-6)
    assert all(v["status"] == "identical" for n, v in res["variables"].items() if n != "tsoil")
    assert compare(a, b, allow=["tsoil"])["ok"]
    text = compare_text(res)
    assert "tsoil" in text and "lev[2]" in text and "DIFFERENT" in text


def test_compare_reads_in_blocks_and_gets_the_same_answer(tmp_path, monkeypatch):
    a = regular(tmp_path / "a.nc")
    b = regular(tmp_path / "b.nc")
    with netCDF4.Dataset(b, "r+") as ds:
        v = ds["tsoil"]
        v.set_auto_maskandscale(False)
        old = v[:]
        raw = old.copy()
        raw[0, :, 5:9, 10:20] += np.float32(0.25)  # fill values (1e20) stay as they are
        v[:] = raw
    expected = int(np.count_nonzero(raw != old))
    assert 0 < expected <= 5 * 4 * 10
    whole = compare(a, b)
    seen = []
    orig = NetCDFStore.read_raw

    def spy(self, name, key=None):
        out = orig(self, name, key)
        seen.append((name, np.asarray(out).size))
        return out

    monkeypatch.setattr(blocks, "COMPARE_BLOCK_ELEMENTS", 50)
    monkeypatch.setattr(NetCDFStore, "read_raw", spy)
    blocked = compare(a, b)
    assert blocked["variables"]["tsoil"] == whole["variables"]["tsoil"]
    assert whole["variables"]["tsoil"]["cells_changed"] == expected
    # no read of the 3-D variables exceeds the block limit (the grid's coordinates are read whole)
    assert max(n for name, n in seen if name in ("tsoil", "other")) <= 50


def test_compare_nan_and_fill_are_equal_and_structure_differences_are_found(tmp_path):
    a = regular(tmp_path / "a.nc", chunked=True)
    b = tmp_path / "b.nc"
    # same values, but tsoil rewritten without compression, a new attribute, and a new title
    with netCDF4.Dataset(a) as src, netCDF4.Dataset(b, "w") as dst:
        dst.setncatts({k: src.getncattr(k) for k in src.ncattrs()})
        dst.title = "another title"
        for d in src.dimensions.values():
            dst.createDimension(d.name, len(d))
        for v in src.variables.values():
            v.set_auto_maskandscale(False)
            fill = v.getncattr("_FillValue") if "_FillValue" in v.ncattrs() else None
            w = dst.createVariable(v.name, v.dtype, v.dimensions, fill_value=fill)
            w.set_auto_maskandscale(False)
            w.setncatts({k: v.getncattr(k) for k in v.ncattrs() if k != "_FillValue"})
            w[:] = v[:]
        dst["other"].note = "touched"
    res = compare(a, b)
    assert res["variables"]["tsoil"]["cells_changed"] == 0  # fill == fill
    assert not res["ok"]
    s = " | ".join(res["differences"])
    assert "global attribute 'title' differs" in s
    assert "variable 'tsoil': chunking" in s and "variable 'tsoil': filters" in s
    assert "variable 'other': attribute 'note' differs" in s
    assert compare(a, b, allow=["tsoil", "other"])["differences"] == ["global attribute 'title' differs "
                                                                              "('test file' vs 'another title')"]
    # NaN against NaN is equal; a NaN against a number is a change that "became missing"
    c, d = tmp_path / "c.nc", tmp_path / "d.nc"
    for path, vals in ((c, [1.0, np.nan, 3.0]), (d, [1.0, np.nan, np.nan])):
        with netCDF4.Dataset(path, "w") as ds:
            ds.createDimension("n", 3)
            ds.createVariable("x", "f8", ("n",))[:] = vals
    r = compare(c, d)
    assert r["variables"]["x"]["cells_changed"] == 1 and r["variables"]["x"]["cells_became_missing"] == 1
    assert r["variables"]["x"]["weights"] == "equal" and r["grid"] is None


def test_compare_history_alone_is_ok_but_not_identical(tmp_path):
    a = regular(tmp_path / "a.nc")
    b = tmp_path / "b.nc"
    shutil.copy(a, b)
    with netCDF4.Dataset(b, "r+") as ds:
        ds.history = "2000-01-01T00:00:00Z: something\n" + ds.history
    res = compare(a, b)
    assert res["ok"] and not res["identical"] and res["differences"] == []


def test_compare_bad_input_is_one_line_exit_2(tmp_path, capsys):
    a = regular(tmp_path / "a.nc")
    (tmp_path / "text.nc").write_text("not netCDF")
    assert main(["compare", str(a), str(tmp_path / "missing.nc")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "missing.nc" in err and "Traceback" not in err
    assert main(["compare", str(tmp_path / "text.nc"), str(a)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not a readable netCDF file" in err
    with pytest.raises(InputError):
        compare(a, tmp_path)


def test_lon_arc_across_the_dateline():
    assert _lon_arc(np.array([175.0, -175.0, 179.0])) == pytest.approx((175.0, 185.0))
    assert _lon_arc(np.array([170.0, 190.0, 185.0])) == pytest.approx((170.0, 190.0))
    assert _lon_arc(np.array([-10.0, 10.0])) == pytest.approx((-10.0, 10.0))
    assert _lon_arc(np.array([350.0, 10.0])) == pytest.approx((350.0, 370.0))


# ---------------------------------------------------------------------------------------------
# verify
# ---------------------------------------------------------------------------------------------


def test_verify_passes_on_the_demo(demo, capsys):
    res = verify(demo["prov"])
    assert res["ok"], res["message"]
    assert res["message"].startswith("verified")
    assert all(res["checks"].values())
    assert main(["verify", str(demo["prov"])]) == 0
    assert "verified" in capsys.readouterr().out
    json.dumps(res, allow_nan=False)


def test_verify_fails_naming_the_variable_after_one_value_is_altered(demo, tmp_path, capsys):
    copy = tmp_path / "copy.nc"
    shutil.copy(demo["out"], copy)
    before = sha(demo["out"])
    with netCDF4.Dataset(copy, "r+") as ds:
        v = ds["albedo_index"]  # a variable the recipe does not touch
        v.set_auto_maskandscale(False)
        v[10, 10] = v[10, 10] + 1
    res = verify(demo["prov"], output=copy)
    assert not res["ok"]
    assert "albedo_index" in res["message"] and "altered after apply" in res["message"]
    assert not res["checks"]["output_sha256"] and not res["checks"]["same_as_rerun"]
    assert res["checks"]["ledger"] and res["checks"]["input_sha256"]
    assert sha(demo["out"]) == before  # verify writes nothing beside the files it checks
    assert main(["verify", str(demo["prov"]), "--output", str(copy)]) == 3
    assert "albedo_index" in capsys.readouterr().out


def test_verify_refuses_a_different_input(demo, tmp_path):
    other = write_demo_restart(tmp_path / "other.nc", nlon=60, nlat=40)
    res = verify(demo["prov"], input=other)
    assert not res["ok"] and "input" in res["message"] and "differs" in res["message"]


def test_verify_missing_recipe_file_uses_the_recorded_text_else_a_clear_error(demo, tmp_path):
    rec = json.loads(demo["prov"].read_text())
    rec["recipe"]["path"] = str(tmp_path / "gone.yaml")
    rec["recipe"].pop("relative_path", None)
    p = tmp_path / "r.provenance.json"
    p.write_text(json.dumps(rec))
    res = verify(p)  # the record keeps the recipe's text; its canonical sha256 is checked
    assert res["ok"] and res["checks"]["recipe_sha256"], res["message"]
    assert any(c.startswith("recipe the recipe text stored in the record") for c in res["checked"]), res["checked"]
    rec["recipe"]["text"] = None
    p.write_text(json.dumps(rec))
    with pytest.raises(InputError, match="gone.yaml.*missing.*--recipe"):
        verify(p)


# ---------------------------------------------------------------------------------------------
# preview report and mask
# ---------------------------------------------------------------------------------------------


def test_preview_json_equals_the_provenance_ledger(demo, tmp_path):
    j = tmp_path / "preview.json"
    assert main(["preview", str(RECIPE), "--input", str(demo["src"]), "--json", str(j)]) == 0
    preview = json.loads(j.read_text())
    recorded = json.loads(demo["prov"].read_text())["ledger"]
    assert preview == recorded  # one ledger format; the run's I/O figures live beside it, under "io"


def test_preview_report_figures_markdown_and_no_stray_files(demo, tmp_path):
    folder = tmp_path / "work"
    folder.mkdir()
    src = folder / "in.nc"
    shutil.copy(demo["src"], src)
    before = listing(folder)
    src_sha = sha(src)
    led = json.loads(demo["prov"].read_text())["ledger"]
    path = preview_report(RECIPE, src, None, folder / "rep")
    assert path == folder / "rep" / "preview.md"
    assert listing(folder) - before == {"rep"} | {f"rep/{n}" for n in listing(folder / "rep")}
    assert sha(src) == src_sha
    names = listing(folder / "rep")
    pngs = sorted(n for n in names if n.endswith(".png"))
    assert names == {"preview.md", "report.html", *pngs}
    assert {"weights.png", "surface_anomaly.png", "profile.png", "histogram_soil.png"} <= set(pngs)
    for n in pngs:
        img = mpimg.imread(folder / "rep" / n)
        assert img.shape[:2] == (figures.FIG_PIXELS[1], figures.FIG_PIXELS[0]), n
    md = path.read_text()
    assert "demo-cold-highland" in md and led["region"] and str(led["region"]["cells_weight_above_0"]) in md
    assert "check these numbers before submission" in md and "protocol" in md
    for n in pngs:
        assert f"]({n})" in md
    # the ledger table carries the numbers of api.ledger_text
    row0 = led["variables"]["tsoil"]["layers"][0]
    assert f"{row0['area_weighted_mean']:.4g}" in api.ledger_text(led)
    assert f"| {row0['area_weighted_mean']:.4g} |" in md
    assert "energy" in md.lower() and "frozen_region_total_kg" in md
    # every note of the ledger (what initgen inferred or guessed) stands in the report too
    assert led["notes"] and "## What initgen inferred" in md
    for key, said in led["notes"].items():
        assert f"| {key.replace('_', ' ')} | {said} |" in md


def test_cli_preview_writes_only_what_is_asked(demo, tmp_path):
    folder = tmp_path / "w"
    folder.mkdir()
    src = folder / "in.nc"
    shutil.copy(demo["src"], src)
    before = listing(folder)
    assert main(["preview", str(RECIPE), "-i", str(src)]) == 0
    assert listing(folder) == before
    assert main(["preview", str(RECIPE), "-i", str(src), "--json", str(folder / "l.json")]) == 0
    assert listing(folder) == before | {"l.json"}


def test_mask_file_is_cf_and_holds_the_weights(demo, tmp_path):
    out = tmp_path / "mask.nc"
    png = tmp_path / "mask.png"
    assert main(["mask", str(RECIPE), "-i", str(demo["src"]), "-o", str(out), "--png", str(png)]) == 0
    w, grid, plan = api.weights(RECIPE, demo["src"])
    with netCDF4.Dataset(out) as ds:
        v = ds["region_weight"]
        assert v.units == "1" and list(v.valid_range) == [0.0, 1.0] and v.long_name
        assert v.dimensions == grid.dims
        assert v.initgen_recipe_sha256 == plan.recipe.sha256 and v.initgen_recipe_name == "demo-cold-highland"
        assert v.initgen_block0_name == "cold-highland" and v.initgen_block0_taper_km == 300.0
        assert v.initgen_block0_taper_placement == "outside"
        np.testing.assert_array_equal(v[:], w)
        assert ds["lon"].standard_name == "longitude" and ds["lon"].units == "degrees_east"
        assert ds["lat"].standard_name == "latitude" and ds["lat"].units == "degrees_north"
        assert ds.Conventions.startswith("CF-")
    assert mpimg.imread(png).shape[:2] == (figures.FIG_PIXELS[1], figures.FIG_PIXELS[0])
    # existing outputs need --force; the input is never an output
    assert main(["mask", str(RECIPE), "-i", str(demo["src"]), "-o", str(out)]) == 2
    assert main(["mask", str(RECIPE), "-i", str(demo["src"]), "-o", str(out), "--force"]) == 0
    in_sha = sha(demo["src"])
    with pytest.raises(InputError, match="output is the input"):
        write_mask(RECIPE, demo["src"], None, demo["src"], force=True)
    assert sha(demo["src"]) == in_sha


@pytest.mark.parametrize("kind", ["curvilinear", "points"])
def test_mask_and_map_on_other_grid_kinds(tmp_path, kind):
    lon, lat = np.meshgrid(np.linspace(0, 90, 12), np.linspace(-20, 60, 10))
    rot = lon + 0.1 * lat  # a gently skewed grid
    if kind == "curvilinear":
        src = curvilinear(tmp_path / "in.nc", rot, lat)
    else:
        src = points(tmp_path / "in.nc", rot.ravel(), lat.ravel())
    rec = box_recipe(tmp_path, taper=500)
    with pytest.warns(Warning):  # no cell areas on these grids: equal weights, with a warning
        write_mask(rec, src, None, tmp_path / "m.nc", png=tmp_path / "m.png")
    with netCDF4.Dataset(tmp_path / "m.nc") as ds:
        v = ds["region_weight"]
        assert v.coordinates == "lat lon" and ds["lon"].dimensions == v.dimensions
        assert 0 < v[:].max() <= 1
    assert mpimg.imread(tmp_path / "m.png").shape[:2] == (figures.FIG_PIXELS[1], figures.FIG_PIXELS[0])


def test_compare_box_recipe_output_matches_filemaker_region(tmp_path):
    src = regular(tmp_path / "in.nc")
    rec = box_recipe(tmp_path)
    out = tmp_path / "out.nc"
    record = api.apply(rec, src, out)
    res = compare(src, out, allow=list(record["ledger"]["variables"]))
    assert res["ok"]
    a, b = read_raw(src, "tsoil"), read_raw(out, "tsoil")
    assert res["variables"]["tsoil"]["cells_changed"] == int((a != b).sum())
    box = res["variables"]["tsoil"]["bbox"]
    assert 20 <= box["lon"][0] <= box["lon"][1] <= 80 and 10 <= box["lat"][0] <= box["lat"][1] <= 50
    assert res["variables"]["tsoil"]["max_abs_change"] == pytest.approx(2.0, abs=1e-4)


@pytest.mark.parametrize("kind", ["regular-layer-last", "curvilinear", "points"])
def test_compare_box_of_one_changed_cell_on_every_grid_kind(tmp_path, kind):
    lon2, lat2 = np.meshgrid(np.linspace(0, 90, 12), np.linspace(-20, 60, 10))
    if kind == "regular-layer-last":
        a = regular(tmp_path / "a.nc", layer_first=False)
        with netCDF4.Dataset(a) as ds:
            lon2, lat2 = np.meshgrid(ds["lon"][:], ds["lat"][:])
        index, name = (0, 9, 7, 3), "tsoil"  # (time, lat, lon, lev)
        cell, layer = (9, 7), 3
    elif kind == "curvilinear":
        a = curvilinear(tmp_path / "a.nc", lon2 + 0.1 * lat2, lat2)
        lon2 = lon2 + 0.1 * lat2
        index, name, cell, layer = (1, 4, 5), "tsoil", (4, 5), 1  # (lev, y, x)
    else:
        a = points(tmp_path / "a.nc", lon2.ravel(), lat2.ravel())
        lon2, lat2 = lon2.ravel(), lat2.ravel()
        index, name, cell, layer = (17, 2), "tsoil", (17,), 2  # (column, lev)
    b = tmp_path / "b.nc"
    shutil.copy(a, b)
    with netCDF4.Dataset(b, "r+") as ds:
        v = ds[name]
        v.set_auto_maskandscale(False)
        v[index] = v[index] + np.float32(1.0)
    res = compare(a, b)
    if kind != "regular-layer-last":  # no cell areas: the grid's warning becomes a note, not a warning
        assert any("equal weights" in n for n in res["notes"])
    t = res["variables"][name]
    assert t["cells_changed"] == 1
    assert [r["cells_changed"] for r in t["layers"]] == [int(i == layer) for i in range(5)]
    assert t["bbox"]["lon"] == pytest.approx([lon2[cell]] * 2)
    assert t["bbox"]["lat"] == pytest.approx([lat2[cell]] * 2)
    assert t["area_weighted_mean_change"] == pytest.approx(1.0, abs=1e-4)



def test_importing_initgen_does_not_import_matplotlib():
    code = "import sys, initgen.reports.compare, initgen.reports.preview, initgen.reports.verify, initgen.reports.mask, initgen.cli; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"


def test_verify_and_preview_of_one_ensemble_member(demo, tmp_path):
    import inspect

    pairs = RECIPE.parent / "demo-warm-cold-pairs.yaml"
    if not pairs.exists() or "member" not in inspect.signature(api.apply).parameters:
        pytest.skip("ensemble members are not available in this tree")
    out = tmp_path / "cold.nc"
    record = api.apply(pairs, demo["src"], out, member="cold-x0.5")
    assert record["member"]["name"] == "cold-x0.5"
    res = verify(Path(str(out) + ".provenance.json"))
    assert res["ok"], res["message"]
    assert res["checks"]["member"]
    md = preview_report(pairs, demo["src"], None, tmp_path / "rep", member="cold-x0.5").read_text()
    assert "member cold-x0.5" in md
    row0 = record["ledger"]["variables"]["tsoil"]["layers"][0]
    assert f"| {row0['area_weighted_mean']:.4g} |" in md  # the member's ledger, not the recipe as written


def test_compare_text_says_what_differs(tmp_path):
    a = regular(tmp_path / "a.nc")
    b = tmp_path / "b.nc"
    shutil.copy(a, b)
    with netCDF4.Dataset(b, "r+") as ds:
        ds["other"][0, 0] = 5.0
    text = compare_text(compare(a, b, allow=["other"]))
    assert "result: OK, differences only in other (allowed)" in text and "history" not in text.splitlines()[2]
    with netCDF4.Dataset(b, "r+") as ds:
        ds.history = "changed"
    text = compare_text(compare(a, b, allow=["other"]))
    assert "result: OK, differences only in other (allowed) and the history attribute" in text
    md = compare_markdown(compare(a, b))
    assert md.startswith("# initgen compare: DIFFERENT") and "other" in md


def test_provenance_records_referenced_files_and_verify_names_a_changed_one(tmp_path):
    """The recipe's hash covers its text; the record also hashes every file the recipe reads,
    and verify names a file that changed since the run (sha256 via hashlib as the reference)."""
    write_demo_restart(tmp_path / "in.nc")
    (tmp_path / "shape.geojson").write_text(json.dumps({"type": "Polygon", "coordinates": [
        [[175, 33], [188, 33], [188, 44], [175, 44], [175, 33]]]}))
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text(taper_km=0).replace("[{box: {lon: [20, 80], lat: [10, 50]}}]",
                                                       "[{geojson: shape.geojson}]"))
    record = api.apply(rec, tmp_path / "in.nc", tmp_path / "out.nc")
    files = record["recipe"]["files"]
    key = "perturbations[0].region.include[0].geojson"
    assert files[key]["sha256"] == sha(tmp_path / "shape.geojson")
    prov = tmp_path / "out.nc.provenance.json"
    assert verify(prov)["ok"]
    (tmp_path / "shape.geojson").write_text(json.dumps({"type": "Polygon", "coordinates": [
        [[176, 34], [186, 34], [186, 42], [176, 42], [176, 34]]]}))
    res = verify(prov)
    assert not res["ok"] and "shape.geojson" in res["message"] and key in res["message"]
