"""The typed ledger view (engine/ledger_view.py) reads every ledger the demo makes and gives the same
dict back, so the JSON of a provenance record is unchanged (JSON as in RFC 8259, serialised by the
standard library's ``json``); a record of an earlier initgen, without the newer keys, still reads."""

from __future__ import annotations

import copy
import json
import shutil

import pytest

from initgen import api
from initgen.demo import write_demo_extras, write_demo_restart
from initgen.engine.ledger_view import LedgerView
from initgen.io.shipped import shipped_file

import filemaker as fm
from clikit import RECIPES, box_recipe_text

SHIPPED = sorted(p.name for p in RECIPES.glob("demo-*.yaml"))
assert SHIPPED, f"no shipped demo recipes in {RECIPES}"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("ledger-view-demo")
    for name in SHIPPED:
        shutil.copy(RECIPES / name, out / name)
    shutil.copy(shipped_file("masks", "demo-highland.geojson"), out / "demo-highland.geojson")
    write_demo_restart(out / "demo-restart.nc")
    write_demo_extras(out)
    return out


def _ledgers(demo, name) -> list[dict]:
    """The recipe as written, and every member of a recipe with members."""
    out = [api.preview(demo / name, demo / "demo-restart.nc")]
    if "members:" in (demo / name).read_text():
        out += [led for _, led in api.preview_members(demo / name, demo / "demo-restart.nc")]
    return out


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("name", SHIPPED)
def test_round_trip_is_exact_for_every_shipped_recipe(demo, name):
    for led in _ledgers(demo, name):
        view = LedgerView.from_dict(led)
        back = view.to_dict()
        assert back == led
        # the same JSON text, key order included: what a provenance record stores
        assert json.dumps(back, indent=2, allow_nan=False) == json.dumps(led, indent=2, allow_nan=False)
        assert LedgerView.from_dict(back) == view


def test_record_json_unchanged_and_fields_typed(demo, tmp_path):
    record = api.apply(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc", tmp_path / "out.nc")
    stored = json.loads((tmp_path / "out.nc.provenance.json").read_text())["ledger"]
    view = LedgerView.from_dict(stored)
    assert json.dumps(view.to_dict()) == json.dumps(stored)
    led = record["ledger"]
    # the typed fields are the dict's values, not copies computed another way
    assert view.region.cells_weight_above_0 == led["region"]["cells_weight_above_0"]
    assert view.physics.mode == led["physics"]["mode"]
    soil = view.of_role("soil_temperature")[0]
    assert [r.area_weighted_mean for r in soil.rows] == \
        [r["area_weighted_mean"] for r in led["variables"][soil.name]["layers"]]
    assert dict(view.physics.totals) == {k: v for k, v in led["physics"].items() if "_region_total_" in k}
    assert view.persistence.remaining_fraction == tuple(led["persistence"]["remaining_fraction"])


def test_record_of_an_earlier_version_reads_with_newer_keys_missing(demo):
    led = api.preview(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc")
    old = copy.deepcopy(led)
    for key in ("member_factors", "layers", "persistence", "input_phase_disequilibrium", "water", "data_blocks_read",
                "notes", "cells_not_in_phase_equilibrium_before"):
        old.pop(key, None)
    for var in old["variables"].values():
        for row in var.get("layers") or [var.get("field")]:
            row.pop("cells_in_region", None)
    old["physics"]["invariants"].pop("cells_made_inconsistent", None)
    view = LedgerView.from_dict(old)
    assert view.member_factors is None and view.layers is None and view.persistence is None
    assert view.input_phase_disequilibrium is None and view.water is None and view.notes == {}
    assert view.cells_not_in_phase_equilibrium_before is None
    assert all(r.cells_in_region is None for v in view.variables.values() for r in v.rows)
    assert view.physics.invariants.cells_made_inconsistent is None
    assert view.to_dict() == old          # nothing invented on the way back
    # an empty or partial dict reads too: sections are empty, not errors
    empty = LedgerView.from_dict({})
    assert empty.variables == {} and empty.blocks == () and empty.physics.totals == []
    assert LedgerView.from_dict({"future_key": [1, 2]}).to_dict()["future_key"] == [1, 2]


# --- the writer builds the view: water-file runs, and the sections a run leaves out ------------------

WATER_RECIPE = """initgen_recipe: 1
name: ledger-water
perturbations:
  - name: b
    region: {{include: [{{box: {{lon: [-25, 25], lat: [-15, 15]}}}}], taper_km: 500}}
    anomaly: {{constant_K: {dT}}}
    profile: {{kind: exponential, efolding_m: 0.5}}
physics: {{mode: {mode}, phase_rule: {rule}, texture: loam}}
"""
RUNS = [("energy", 2.0), ("energy", -3.0), ("temperature", 4.0), ("none", 1.0)]


def _same_json(led: dict) -> LedgerView:
    """The ledger a run returns is the view's dict: read back, it gives the same JSON text
    (RFC 8259, serialised by the standard library's ``json``, key order included)."""
    view = LedgerView.from_dict(led)
    assert json.dumps(view.to_dict(), indent=2, allow_nan=False) == json.dumps(led, indent=2, allow_nan=False)
    assert LedgerView.from_dict(view.to_dict()) == view
    return view


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("units", ["kg m-2", "m3 m-3"])
@pytest.mark.parametrize("convention", sorted(fm.WATER_VARS))
def test_round_trip_is_exact_for_water_file_runs(tmp_path, convention, units):
    f = fm.water_file(tmp_path / "in.nc", convention, units)
    lay = fm.water_layout(tmp_path / "layout.yaml", convention, units)
    for mode, dT in RUNS:
        for rule in ("change_driven", "equilibrium"):
            rec = tmp_path / f"{mode}{dT:+g}{rule}.yaml"
            rec.write_text(WATER_RECIPE.format(dT=dT, mode=mode, rule=rule))
            out = tmp_path / f"{rec.stem}.nc"
            record = api.apply(rec, f, out, lay)
            stored = json.loads(out.with_name(out.name + ".provenance.json").read_text())["ledger"]
            assert stored == record["ledger"]
            view = _same_json(stored)
            # the sections a run makes or leaves out: left out, never written as null
            active = mode != "none"
            assert ("water" in stored) == active and ("phase_rule" in stored["physics"]) == active
            assert ("input_phase_disequilibrium" in stored) == active
            assert view.data_blocks_read == stored["data_blocks_read"] >= 1
            if active:
                assert view.water["convention"] == convention
                # total_only: the file's model diagnoses the split, so the equilibrium rule is applied
                # whatever the recipe says, and the disequilibrium section says the same rule
                applied = "equilibrium" if convention == "total_only" else rule
                assert view.input_phase_disequilibrium.acted_on == (applied == "equilibrium")
                assert view.physics.phase_rule == applied
                assert ("cells_change_beyond_imposed" in stored["physics"]["invariants"]) == (mode == "energy")
            else:   # no soil water read: persistence says why, in three keys
                assert list(stored["persistence"]) == ["horizons_days", "remaining_fraction", "not_estimated"]
                assert stored["persistence"]["remaining_fraction"] is None


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_round_trip_is_exact_without_cell_areas(tmp_path):
    """Points without cell areas: the area is null (a key the ledger keeps), the totals are absent."""
    src = fm.points_dateline(tmp_path / "p.nc", water=True)
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text(160, -160, -40, 40) + "physics: {mode: energy, texture: loam}\n")
    led = api.preview(rec, src)
    view = _same_json(led)
    assert "area_m2" in led["region"] and led["region"]["area_m2"] is None
    assert view.physics.totals == [] and view.physics.totals_left_out.startswith("no cell areas")
    assert [k for k in led["physics"] if "_per_layer_" in k] == [q.per_layer_key for q in view.physics.quantities]
