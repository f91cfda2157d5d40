"""Every shipped recipe runs against the demo file; source kinds and block order behave as documented."""

from __future__ import annotations

import numpy as np
import pytest

from initgen import api
from clikit import read_raw as raw
from clikit import RECIPES, ROOT

EXAMPLES = sorted(p.name for p in (ROOT / "recipes").glob("*.yaml"))


@pytest.fixture(scope="module")
def demo(demo_copy):
    """The demo, made once per session (conftest); this module writes recipes into its copy."""
    return demo_copy


@pytest.mark.parametrize("name", EXAMPLES)
def test_every_shipped_recipe_runs_on_the_demo(demo, name, tmp_path):
    text = (ROOT / "recipes" / name).read_text()
    assert text.startswith("# "), "every example opens with a comment saying what it is for"
    out = tmp_path / "out.nc"
    record = api.apply(demo / name, demo / "demo-restart.nc", out)
    assert any(v["layers" if "layers" in v else "field"] for v in record["ledger"]["variables"].values())
    changed = [n for n, v in record["ledger"]["variables"].items()
               if any(r["cells_changed"] for r in (v.get("layers") or [v.get("field")]))]
    assert changed, f"{name} changed nothing"


def test_donor_blend_untouched_at_w0_equal_donor_at_w1(demo, tmp_path):
    """new = (1 - w) old + w donor: exact at w = 0 and w = 1 (definition of the blend)."""
    out = tmp_path / "donor.nc"
    api.apply(demo / "demo-donor-transplant.yaml", demo / "demo-restart.nc", out)
    w, grid, plan = api.weights(demo / "demo-donor-transplant.yaml", demo / "demo-restart.nc")
    old, new, donor = (raw(p, "tsoil")[0] for p in (demo / "demo-restart.nc", out, demo / "demo-restart-donor.nc"))
    assert np.array_equal(new[:, w == 0], old[:, w == 0])
    assert (w == 1).sum() > 10
    assert np.array_equal(new[:, w == 1], donor[:, w == 1])
    # water is transplanted too, and total water stays that of the blend of the two states
    liq, ice = raw(out, "wliq")[0], raw(out, "wice")[0]
    dl, di = raw(demo / "demo-restart-donor.nc", "wliq")[0], raw(demo / "demo-restart-donor.nc", "wice")[0]
    np.testing.assert_allclose((liq + ice)[:, w == 1], (dl + di)[:, w == 1], rtol=1e-5)


def test_two_blocks_equal_two_runs(demo, tmp_path):
    """A recipe with two blocks equals applying them one after the other (documented order)."""
    text = (ROOT / "recipes" / "demo-two-blocks-snow.yaml").read_text()
    head, blocks = text.split("perturbations:\n")
    first, second = blocks.split("  - name: warm-lowland\n")
    (demo / "first.yaml").write_text(head + "perturbations:\n" + first)
    (demo / "second.yaml").write_text(head.replace("demo-two-blocks-snow", "second") + "perturbations:\n"
                                      "  - name: warm-lowland\n" + second)
    both = tmp_path / "both.nc"
    api.apply(demo / "demo-two-blocks-snow.yaml", demo / "demo-restart.nc", both)
    step1, step2 = tmp_path / "s1.nc", tmp_path / "s2.nc"
    api.apply(demo / "first.yaml", demo / "demo-restart.nc", step1)
    api.apply(demo / "second.yaml", step1, step2)
    for name in ("tsoil", "tskin", "snow_amount", "snow_thick"):
        np.testing.assert_array_equal(raw(both, name), raw(step2, name))


def test_snow_temperature_never_above_freezing(demo, tmp_path):
    text = """initgen_recipe: 1
name: hot-snow
perturbations:
  - name: hot
    region: {include: [{geojson: demo-highland.geojson}], taper_km: 0}
    anomaly: {constant_K: 20}
    targets: [snow_temperature, skin_temperature]
"""
    (demo / "hot.yaml").write_text(text)
    out = tmp_path / "hot.nc"
    rec = api.apply(demo / "hot.yaml", demo / "demo-restart.nc", out)
    t = raw(out, "tsnow")
    land = t != -9999.0
    assert t[land].max() <= 273.15 + 1e-4  # snow cannot be warmer than its melting point (common practice)
    assert rec["ledger"]["clamps"]["snow_temperature_above_freezing"] > 0
    skin, snow = raw(out, "tskin")[0], raw(demo / "demo-restart.nc", "snow_amount")[0]
    assert skin[(snow > 0) & (snow != -9999.0)].max() <= 273.15 + 1e-4


def test_demo_profile_decays_as_damping_formula(demo):
    """Per-layer factors of the demo recipe: layer means of exp(-z/d), d = sqrt(kappa P / pi).

    Reference: Carslaw and Jaeger (1959), periodic surface temperature in a semi-infinite solid;
    kappa = 5e-7 m2 s-1 and P = 365.25 days give d = 2.24 m (value computed from the formula).
    """
    led = api.preview(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc")
    factors = np.array(led["blocks"][0]["layer_factors"])
    d = np.sqrt(5e-7 * 365.25 * 86400 / np.pi)
    assert d == pytest.approx(2.24, abs=0.005)
    top = np.array([0.0, 0.05, 0.1, 0.2, 0.4, 0.7, 1.1, 1.9])
    bot = np.array([0.05, 0.1, 0.2, 0.4, 0.7, 1.1, 1.9, 3.1])
    expect = d * (np.exp(-top / d) - np.exp(-bot / d)) / (bot - top)
    np.testing.assert_allclose(factors, expect, rtol=1e-6)
    assert np.all(np.diff(factors) < 0)


def test_skin_follows_top_layer_in_energy_mode(demo, tmp_path):
    """With a physics mode the skin temperature moves with the top soil layer's realised change,
    which latent heat makes smaller than the imposed one where water freezes (issue: energy and
    phase stay consistent), and stays at or below 0 C under snow."""
    out = tmp_path / "e.nc"
    api.apply(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc", out)
    t0, t1 = raw(demo / "demo-restart.nc", "tsoil")[0, 0], raw(out, "tsoil")[0, 0]
    s0, s1 = raw(demo / "demo-restart.nc", "tskin")[0], raw(out, "tskin")[0]
    land = t0 != -9999.0
    d_top = (t1.astype(float) - t0)[land]
    d_skin = (s1.astype(float) - s0)[land]
    snow = raw(demo / "demo-restart.nc", "snow_amount")[0][land]
    free = (snow <= 0) | (s0[land] + d_top <= 273.15)
    np.testing.assert_allclose(d_skin[free], d_top[free], atol=3e-5)  # float32 ulp near 270 K
    assert np.any(d_top < -0.5) and np.all(s1[land][snow > 0] <= 273.15 + 1e-4)


def test_start_dates_recipe_writes_every_member_for_every_input(demo, tmp_path):
    res = api.apply_ensemble(demo / "demo-start-dates.yaml",
                             [demo / "demo-restart.nc", demo / "demo-restart-donor.nc"], tmp_path / "starts", workers=1)
    assert res.exit_code == 0
    for start in ("demo-restart", "demo-restart-donor"):
        for member in ("cold", "cold-strong"):
            assert (tmp_path / "starts" / start / f"{member}.nc").is_file()
    import json

    manifest = json.loads((tmp_path / "starts" / "manifest.json").read_text())
    assert len(manifest["outputs"]) == 4 and {r["status"] for r in manifest["outputs"]} == {"ok"}
    # the strong member's change is 1.5 times the plain one where no phase change intervenes
    d1 = raw(tmp_path / "starts/demo-restart/cold.nc", "tsoil") - raw(demo / "demo-restart.nc", "tsoil")
    d2 = raw(tmp_path / "starts/demo-restart/cold-strong.nc", "tsoil") - raw(demo / "demo-restart.nc", "tsoil")
    assert np.median(d2[d1 < -0.5] / d1[d1 < -0.5]) == pytest.approx(1.5, rel=1e-3)


def test_snow_temperature_changes_only_where_there_is_snow(demo, tmp_path):
    out = tmp_path / "s.nc"
    api.apply(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc", out)
    snow = raw(demo / "demo-restart.nc", "snow_amount")[0]
    d = raw(out, "tsnow")[0] - raw(demo / "demo-restart.nc", "tsnow")[0]
    assert np.any(d[:, snow > 0] != 0)
    assert not np.any(d[:, snow <= 0])


def test_mismatched_soil_parameters_are_reported_not_acted_on(demo, tmp_path):
    """The demo's water was put in equilibrium for loam (Clapp and Hornberger 1978). With sand
    parameters its liquid water lies above sand's supercooled limit (Niu and Yang 2006). The
    change-driven rule leaves that as it is (the soil never moves against the imposed change);
    the ledger counts, per layer, what the equilibrium rule would move, and a warning says so.
    With phase_rule equilibrium the water freezes on its own and releases heat: the soil warms
    under a cold recipe, which the ledger flags."""
    text = (demo / "demo-cold-highland.yaml").read_text().replace("texture: loam", "texture: sand")
    (demo / "sand.yaml").write_text(text)
    with pytest.warns(UserWarning, match="not in phase equilibrium for the soil parameters used \\(sand\\)"):
        led = api.preview(demo / "sand.yaml", demo / "demo-restart.nc")
    shift = led["input_phase_disequilibrium"]
    assert sum(shift["cells_per_layer"]) > 0 and sum(shift["equilibrium_rule_would_freeze_kg_per_layer"]) > 0
    assert shift["acted_on"] is False
    assert "realised_change_opposite_to_imposed" not in led["flags"]
    (demo / "sand-eq.yaml").write_text(text.replace("physics:", "physics:\n  phase_rule: equilibrium"))
    with pytest.warns(UserWarning, match="not in phase equilibrium"):
        eq = api.preview(demo / "sand-eq.yaml", demo / "demo-restart.nc")
    assert eq["input_phase_disequilibrium"]["acted_on"] is True
    plain = api.preview(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc")
    assert "realised_change_opposite_to_imposed" not in plain["flags"]
    assert sum(plain["input_phase_disequilibrium"]["cells_per_layer"]) == 0


SHIPPED = sorted(p.name for p in RECIPES.glob("demo-*.yaml"))


@pytest.mark.parametrize("name", SHIPPED)
def test_every_shipped_recipe_keeps_the_physics_promises_on_the_demo(demo, name):
    """The demo's soil water is consistent with the shipped recipes' soil parameters, so no cell
    is off the freezing curve (nothing for the equilibrium rule to re-balance), and the measured
    invariants hold: water conserved, no change against the imposed one, energy mode within
    the imposed change and its enthalpy budget, temperature mode exact."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")        # no disequilibrium or departure warning either
        led = api.preview(demo / name, demo / "demo-restart.nc")
    phys = led["physics"]
    if phys["mode"] == "none":
        return
    assert sum(led["input_phase_disequilibrium"]["cells_per_layer"]) == 0
    inv = phys.get("invariants")
    if inv is None:                          # a donor blend imposes no change to measure against
        assert "donor" in name
        return
    assert inv["cells_checked"] > 0
    assert abs(inv["water_change_relative"]) < 1e-12
    assert inv["cells_change_opposite_to_imposed"] == 0
    if phys["mode"] == "energy":
        assert inv["cells_change_beyond_imposed"] == 0
        assert inv["max_energy_budget_rel_error"] < 1e-6
    else:
        assert inv["cells_change_not_equal_to_imposed"] == 0


def test_demo_report_page_states_the_phase_rule_invariants_and_parameter_sources(demo, tmp_path):
    """The page a group attaches says which phase rule ran, where the soil parameters came
    from, and the measured invariants (the same ledger numbers as the preview's JSON)."""
    from initgen.reports import preview as report

    report.preview_report(demo / "demo-cold-highland.yaml", demo / "demo-restart.nc", None, tmp_path / "rep")
    text = (tmp_path / "rep" / "report.html").read_text()
    for phrase in ("phase rule <code>change_driven</code>", "Invariants, measured on the changed layer-cells",
                   "cells change opposite to imposed", "Clapp and Hornberger (1978) Table 2, loam"):
        assert phrase in text, phrase


def test_preview_report_of_a_donor_recipe_without_a_given_ledger(demo, tmp_path):
    """The report computes its own ledger when none is given; a donor recipe's run closes the
    donor file, so the ledger and the figures each get their own plan."""
    from initgen.reports import preview as report

    md = report.preview_report(demo / "demo-donor-transplant.yaml", demo / "demo-restart.nc", None, tmp_path / "rep")
    assert (md.parent / "report.html").is_file()
