"""Ensembles: members, noise, output naming, manifest, local and Dask execution, failures."""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import netCDF4
import numpy as np
import pytest
import yaml

from initgen import api
from initgen.outputs import ensemble
from initgen.outputs.members import member_noise
from initgen.outputs import members as members_mod
from initgen.engine import plan as plan_mod
from initgen.science import sources
from initgen.cli import main
from initgen.errors import InputError
from initgen.config.recipe import RECIPE, load_recipe
from initgen.io.atomic import sha256_file
from initgen.io.shipped import shipped_file

PAIRS = shipped_file("recipes", "demo-warm-cold-pairs.yaml")

BASE = """\
initgen_recipe: 1
name: ens-test
seed: 11
perturbations:
  - name: highland
    region:
      include: [{geojson: demo-highland.geojson}]
      taper_km: 300
      elevation: {min_m: 1500, ramp_m: 500}
    anomaly: {constant_K: 2.0}
    profile: {kind: damping, diffusivity_m2_s: 5.0e-7, period_days: 365.25, evaluate: layer_mean}
    targets: [soil_temperature]
physics: {mode: none}
"""


def raw_vars(path) -> dict:
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_maskandscale(False)
        return {name: np.array(v[:]) for name, v in ds.variables.items()}


def assert_same_vars(a, b):
    va, vb = raw_vars(a), raw_vars(b)
    assert va.keys() == vb.keys()
    for name in va:
        assert va[name].dtype == vb[name].dtype and va[name].tobytes() == vb[name].tobytes(), name


def recipe_file(tmp_path, members: dict, base=BASE, name="r.yaml") -> Path:
    data = yaml.safe_load(base)
    data["members"] = members
    p = tmp_path / name
    p.write_text(yaml.safe_dump(data, sort_keys=False))
    return p


@pytest.fixture(scope="module")
def demo(demo_folder) -> Path:
    """The demo restart, made once per session (conftest); read only."""
    return demo_folder / "demo-restart.nc"


@pytest.fixture(scope="module")
def pairs_local(tmp_path_factory, demo):
    """The shipped warm/cold-pairs recipe on the demo file, on two local worker processes (CLI)."""
    out = tmp_path_factory.mktemp("pairs") / "local"
    code = main(["apply", str(PAIRS), "--input", str(demo), "--output", str(out), "--workers", "2"])
    return code, out


# --- the recipe's members section ----------------------------------------------------------


def test_generated_members_names_seeds_and_schema(tmp_path):
    rec = load_recipe(recipe_file(tmp_path, {"scales": [1, 0.5]}))
    ms = members_mod.members(rec)
    # a positive constant anomaly: sign +1 warms, so it is called warm
    assert [m.name for m in ms] == ["warm-x1.0", "cold-x1.0", "warm-x0.5", "cold-x0.5"]
    assert [(m.scale, m.sign, m.offset_K) for m in ms][:2] == [(1.0, 1, 0.0), (1.0, -1, 0.0)]
    assert all(m.seed == sources.member_seed(11, m.name) for m in ms)
    # a negative anomaly: sign +1 cools
    neg = load_recipe(recipe_file(tmp_path, {"scales": [1], "signs": [1]}, BASE.replace("2.0}", "-2.0}")))
    assert [m.name for m in members_mod.members(neg)] == ["cold-x1.0"]
    # the schema that `initgen schema` prints has the section
    props = RECIPE.json()["properties"]["members"]["properties"]
    assert {"list", "scales", "signs", "noise", "output_template"} <= set(props)
    assert props["output_template"]["default"] == "{member}/{input_stem}.nc"


@pytest.mark.parametrize("members, match", [
    ({"list": [{"name": "a"}, {"name": "a", "scale": 2}]}, r"members\.list\[1\]\.name: duplicate name 'a'"),
    ({"scales": [1, 1.0]}, r"members\.scales\[1\]: duplicate member name 'warm-x1\.0'"),
    ({"scales": [1], "signs": [1, 1]}, r"members\.scales\[0\]: duplicate member name 'warm-x1\.0'"),
    ({"list": [{"name": "a", "sign": 0}]}, r"members\.list\[0\]\.sign: must be 1 or -1"),
    ({"list": [{"name": "a/b"}]}, r"members\.list\[0\]\.name: member name 'a/b' may hold only"),
    ({"list": [{"name": "a"}], "signs": [1]}, r"members\.signs: belongs to a generated set"),
    ({"list": [{"name": "a"}], "scales": [1]}, r"members: give exactly one of list, scales"),
    ({"scales": [1], "output_template": "{input_stem}.nc"}, r"members\.output_template: .* has no \{member\}"),
    ({"scales": [1], "output_template": "../{member}.nc"}, r"members\.output_template: .* relative path"),
    ({"scales": [1], "output_template": "{member}/{date}.nc"}, r"members\.output_template: unknown field \{date\}"),
])
def test_bad_members_refused_naming_the_key(tmp_path, members, match):
    with pytest.raises(InputError, match=match):
        load_recipe(recipe_file(tmp_path, members))


def test_duplicate_member_names_refused_on_the_command_line(tmp_path, demo, capsys):
    rec = recipe_file(tmp_path, {"list": [{"name": "w"}, {"name": "w", "sign": -1}]})
    assert main(["apply", str(rec), "--input", str(demo), "--output", str(tmp_path / "o")]) == 2
    assert "members.list[1].name: duplicate name 'w'" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


# --- what a member does to the file ---------------------------------------------------------


def test_scale_zero_member_leaves_every_value_identical(tmp_path, demo):
    # the shipped pairs recipe (energy mode, soil/skin/snow temperature) with a zero member
    data = yaml.safe_load(PAIRS.read_text())
    data["members"] = {"list": [{"name": "zero", "scale": 0}, {"name": "full"}]}
    p = tmp_path / "zero.yaml"
    p.write_text(yaml.safe_dump(data))
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), tmp_path)
    res = api.apply_ensemble(p, [demo], tmp_path / "out", workers=1)
    assert res.exit_code == 0
    prov = json.loads((tmp_path / "out/full/demo-restart.nc.provenance.json").read_text())
    touched = set(prov["ledger"]["variables"])
    assert {"tsoil", "wliq", "wice", "tskin", "tsnow"} <= touched
    before, zero, full = raw_vars(demo), raw_vars(tmp_path / "out/zero/demo-restart.nc"), raw_vars(
        tmp_path / "out/full/demo-restart.nc")
    for name in before:
        assert before[name].tobytes() == zero[name].tobytes(), name
    assert not np.array_equal(before["tsoil"], full["tsoil"])


def test_warm_cold_pair_averages_back_to_the_input(tmp_path, demo):
    """physics none, no clamps: (warm + cold) / 2 equals the input to within float32 rounding.

    Each member's value is the float32 rounding of T +- dT, so the mean of the pair differs from
    the input by at most one float32 spacing at the value (3.05e-5 K near 300 K).
    """
    rec = recipe_file(tmp_path, {"scales": [1.0]})
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), tmp_path)
    res = api.apply_ensemble(rec, [demo], tmp_path / "out", workers=1)
    assert res.exit_code == 0 and all(r["summary"]["clamped_cells"] == 0 for r in res.results)
    with netCDF4.Dataset(demo) as ds:
        t0 = ds["tsoil"][:].filled(np.nan).astype(np.float32)
    warm = netCDF4.Dataset(tmp_path / "out/warm-x1.0/demo-restart.nc")["tsoil"][:].filled(np.nan)
    cold = netCDF4.Dataset(tmp_path / "out/cold-x1.0/demo-restart.nc")["tsoil"][:].filled(np.nan)
    changed = np.isfinite(t0) & (warm != t0)
    assert changed.sum() > 1000
    mean = (warm.astype(np.float64) + cold.astype(np.float64)) / 2
    err = np.abs(mean - t0)[np.isfinite(t0)]
    assert np.all(err <= np.spacing(t0[np.isfinite(t0)])), err.max()
    assert np.all((warm - t0)[changed] > 0) and np.all((cold - t0)[changed] < 0)


def test_noise_same_for_same_seed_and_member_different_otherwise(tmp_path, demo):
    noise = {"sigma_K": 0.5, "length_km": 250}
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), tmp_path)
    rec = load_recipe(recipe_file(tmp_path, {"list": [{"name": "a"}, {"name": "b"}], "noise": noise}))
    other_seed = load_recipe(recipe_file(tmp_path, {"list": [{"name": "a"}], "noise": noise},
                                         BASE.replace("seed: 11", "seed: 12"), name="s.yaml"))
    check = api.check(rec, input=demo)
    plan = check.plan
    region = plan.region
    a1, b1 = (member_noise(plan, m) for m in members_mod.members(rec))
    a2 = member_noise(plan, members_mod.members(load_recipe(rec.path))[0])
    a3 = member_noise(plan, members_mod.members(other_seed)[0])
    assert np.array_equal(a1, a2)
    assert not np.allclose(a1[region], b1[region]) and not np.allclose(a1[region], a3[region])
    assert np.all(a1[~region] == 0) and 0.2 < a1[region].std() < 1.0
    # end to end: two runs of member a are bit-identical, members a and b differ
    api.apply_ensemble(rec, [demo], tmp_path / "one", workers=1)
    api.apply_ensemble(rec, [demo], tmp_path / "two", workers=1, members=["a"])
    assert_same_vars(tmp_path / "one/a/demo-restart.nc", tmp_path / "two/a/demo-restart.nc")
    assert not np.array_equal(raw_vars(tmp_path / "one/a/demo-restart.nc")["tsoil"],
                              raw_vars(tmp_path / "one/b/demo-restart.nc")["tsoil"])


# --- the shipped recipe, the manifest, Dask ------------------------------------------------


def test_shipped_pairs_recipe_on_the_demo_file(pairs_local, demo):
    code, out = pairs_local
    assert code == 0
    man = json.loads((out / "manifest.json").read_text())
    assert man["counts"] == {"outputs": 4, "ok": 4, "failed": 0, "not_run": 0, "pending": 0}
    assert man["recipe"]["sha256"] == load_recipe(PAIRS).sha256
    rows = {r["member"]["name"]: r for r in man["outputs"]}
    assert list(rows) == ["warm-x1.0", "cold-x1.0", "warm-x0.5", "cold-x0.5"]
    for name, r in rows.items():
        path = out / name / "demo-restart.nc"
        assert r["output_relative"] == f"{name}/demo-restart.nc" and r["status"] == "ok"
        assert r["output_sha256"] == sha256_file(path) and r["input_sha256"] == sha256_file(demo)
        prov = json.loads(Path(str(path) + ".provenance.json").read_text())
        assert prov["member"]["seed"] == sources.member_seed(2024, name) == r["member"]["seed"]
        assert prov["member"]["noise"] == {"sigma_K": 0.5, "length_km": 250.0}
    assert rows["warm-x1.0"]["summary"]["top_soil_temperature_change_area_mean_K"] > 0.5
    assert rows["cold-x1.0"]["summary"]["top_soil_temperature_change_area_mean_K"] < -0.5
    assert rows["cold-x1.0"]["summary"]["frozen_kg"] > 0 and rows["cold-x1.0"]["summary"]["latent_J"] < 0
    with open(out / "manifest.csv", newline="") as fh:
        table = list(csv.DictReader(fh))
    assert [t["member"] for t in table] == list(rows) and {t["status"] for t in table} == {"ok"}
    assert table[0]["output_sha256"] == rows["warm-x1.0"]["output_sha256"]


def test_preview_summarises_every_member(demo, capsys, tmp_path):
    assert main(["preview", str(PAIRS), "--input", str(demo), "--json", str(tmp_path / "p.json")]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split() == ["member", "scale", "sign", "offset_K", "top_dT_K", "frozen_kg", "melted_kg",
                              "latent_J", "clamped"]
    assert [line.split()[0] for line in out[1:5]] == ["warm-x1.0", "cold-x1.0", "warm-x0.5", "cold-x0.5"]
    assert [line.split()[1:3] for line in out[1:5]] == [["1", "+1"], ["1", "-1"], ["0.5", "+1"], ["0.5", "-1"]]
    data = json.loads((tmp_path / "p.json").read_text())
    assert len(data["members"]) == 4 and data["members"][1]["member"]["sign"] == -1


def test_dask_cluster_gives_the_same_bytes_as_local_workers(pairs_local, tmp_path):
    distributed = pytest.importorskip("distributed")
    code, out = pairs_local
    demo_file = Path(json.loads((out / "manifest.json").read_text())["outputs"][0]["input"])
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cl:
        res = api.apply_ensemble(PAIRS, [demo_file], tmp_path / "dask", scheduler=cl.scheduler_address)
    assert res.exit_code == 0 and res.manifest["execution"] == {"scheduler": cl.scheduler_address}
    for r in res.results:
        name = r["member"]["name"]
        # every variable's raw bytes (the files differ only in the history line's time)
        assert_same_vars(out / name / "demo-restart.nc", tmp_path / "dask" / name / "demo-restart.nc")


# --- failures, naming, single members -----------------------------------------------------------


def test_a_failing_member_leaves_the_others_complete(tmp_path, demo, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "cold-x0.5").write_text("a file where the member's folder should go")
    code = main(["apply", str(PAIRS), "--input", str(demo), "--output", str(out), "--workers", "2"])
    assert code == 2  # bad input (an unusable output path) of that member
    err = capsys.readouterr().err
    assert "member cold-x0.5" in err and "cannot create the output folder" in err
    man = json.loads((out / "manifest.json").read_text())
    status = {r["member"]["name"]: r["status"] for r in man["outputs"]}
    assert status == {"warm-x1.0": "ok", "cold-x1.0": "ok", "warm-x0.5": "ok", "cold-x0.5": "failed"}
    assert man["counts"]["failed"] == 1
    for name in ("warm-x1.0", "cold-x1.0", "warm-x0.5"):
        assert (out / name / "demo-restart.nc").is_file()
    assert "failed" in (out / "manifest.csv").read_text()


def test_an_unexpected_failure_gives_exit_1_and_the_rest_finish(tmp_path, demo, monkeypatch):
    real = member_noise

    def boom(plan, member):
        if member.name == "warm-x0.5":
            raise RuntimeError("simulated crash")
        return real(plan, member)

    monkeypatch.setattr(members_mod, "member_noise", boom)
    seen = []
    res = api.apply_ensemble(PAIRS, [demo], tmp_path / "out", workers=1, progress=lambda *a: seen.append(a))
    assert res.exit_code == 1
    assert [r["status"] for r in res.results] == ["ok", "ok", "failed", "ok"]
    assert "RuntimeError: simulated crash" in res.results[2]["message"]
    assert seen[-1] == (4, 4, 1)
    assert not (tmp_path / "out/warm-x0.5/demo-restart.nc").exists()  # no partial output
    assert not list((tmp_path / "out").rglob("*initgen-tmp"))


def test_several_inputs_naming_and_clashes(tmp_path, demo, capsys, monkeypatch):
    b = tmp_path / "start-0402.nc"
    shutil.copy(demo, b)
    builds = []
    real_build = plan_mod.build_plan
    monkeypatch.setattr(plan_mod, "build_plan", lambda *a, **k: builds.append(1) or real_build(*a, **k))
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), tmp_path)
    rec = recipe_file(tmp_path, {"list": [{"name": "p", "offset_K": 0.5}],
                                 "output_template": "{input_stem}-{member}.nc"})
    assert main(["apply", str(rec), "--input", str(demo), str(b), "--output", str(tmp_path / "o"), "--workers", "1",
                 "-q"]) == 0
    assert sorted(p.name for p in (tmp_path / "o").glob("*.nc")) == ["demo-restart-p.nc", "start-0402-p.nc"]
    assert len(builds) == 1  # two start dates on one grid: weights, profile and anomaly computed once
    # the second time without --force: refused before anything is written
    assert main(["apply", str(rec), "--input", str(demo), "--output", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "holds an ensemble already" in err and "--resume" in err and "--force" in err
    # a template that names two inputs' outputs alike is refused, naming the key
    rec2 = recipe_file(tmp_path, {"list": [{"name": "p"}], "output_template": "{member}.nc"}, name="r2.yaml")
    with pytest.raises(InputError, match=r"members\.output_template: gives the same output"):
        api.apply_ensemble(rec2, [demo, b], tmp_path / "o2")


def test_member_option_writes_one_file(tmp_path, demo, capsys):
    out = tmp_path / "cold.nc"
    assert main(["apply", str(PAIRS), "--input", str(demo), "--output", str(out), "--member", "cold-x0.5", "-q"]) == 0
    prov = json.loads((tmp_path / "cold.nc.provenance.json").read_text())
    assert prov["member"]["name"] == "cold-x0.5" and prov["member"]["sign"] == -1
    # without a member, the API applies the recipe as written (scale 1, no noise): no member recorded
    assert api.apply(PAIRS, demo, tmp_path / "x.nc")["member"] is None
    assert main(["apply", str(PAIRS), "--input", str(demo), "--output", str(out), "--member", "nope"]) == 2
    assert "--member nope: the recipe has no member of that name" in capsys.readouterr().err
