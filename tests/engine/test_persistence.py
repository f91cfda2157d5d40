"""The persistence estimate in the ledger: how much of the imposed heat anomaly is left after
some days, by the conduction solver of initgen.science.conduction (tested there).

Each check names its source: the analytic slab solution of Carslaw and Jaeger (1959) or the
decay-time scaling of the same book.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from initgen import api
from initgen.science import conduction as c
from initgen.demo import INTERFACES
from initgen.config.recipe import canonical_hash, load_recipe

from clikit import recipe, refused, swap  # the error catalogue's helpers
from clikit import RECIPES


# ---------------------------------------------------------------------------------------------
# The persistence estimate in the ledger
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo(demo_copy):
    """The demo, made once per session (conftest); this module writes recipes into its copy."""
    return demo_copy


BOX = """\
initgen_recipe: 1
name: persistence-test
perturbations:
  - name: lowland
    region:
      include: [{box: {lon: [170, 190], lat: [30, 45]}}]
    anomaly: {constant_K: 2.0}
    profile: PROFILE
"""


def _preview(folder, profile, extra=""):
    path = folder / f"r{abs(hash(profile + extra))}.yaml"
    path.write_text(BOX.replace("PROFILE", profile) + extra)
    return api.preview(path, folder / "demo-restart.nc")


# the 5 cm profile's deep factors (~1e-26 K) make the energy-mode solver report "water froze while
# warming" in 397 demo cells: a phase-change matter (plan._physics / soil.py), not persistence's
@pytest.mark.filterwarnings("ignore:397 soil layer-cell flag")
def test_uniform_profile_persists_longer_than_a_5cm_one(demo):
    """Heat in a thin surface layer leaves through the surface first (Carslaw and Jaeger 1959:
    decay time ~ depth^2 / kappa): a uniform anomaly keeps more of its heat after 30 days than
    one e-folding over 5 cm."""
    phys = "physics: {mode: energy, texture: loam}\n"
    uni = _preview(demo, "{kind: uniform}", phys)["persistence"]
    thin = _preview(demo, "{kind: exponential, efolding_m: 0.05}", phys)["persistence"]
    i30 = uni["horizons_days"].index(30.0)
    assert uni["remaining_fraction"][i30] > 2 * thin["remaining_fraction"][i30]
    assert "Johansen" in uni["conductivity_source"] and "latent heat" in uni["assumptions"]
    assert all(np.diff(uni["remaining_fraction"]) < 0)


def test_constant_properties_match_the_slab_solution(demo):
    """With recipe constants C and k and a uniform profile, every column is the Carslaw and Jaeger
    (1959, Sect. 3.3) slab of the demo's depth (3.1 m). On the model's own 8 layers (the lowest
    1.2 m thick) the region's remaining fraction matches the series within 1.5 % at 10 and 30
    days and 5 % at 90 days (the coarse deep layers' discretisation error, 3.7 % measured against
    160 sub-layers; it vanishes with refinement, see the convergence test)."""
    extra = "persistence: {conductivity_W_m_K: 1.0, heat_capacity_J_m3_K: 2.0e6, horizons_days: [10, 30, 90]}\n"
    p = _preview(demo, "{kind: uniform}", extra)["persistence"]
    depth = INTERFACES[-1]
    for h, f, tol in zip(p["horizons_days"], p["remaining_fraction"], (0.015, 0.015, 0.05)):
        assert f == pytest.approx(c.slab_series_heat(0.5e-6 * h * 86400 / depth ** 2), rel=tol)
    assert p["conductivity_source"] == "recipe persistence.conductivity_W_m_K"
    rows = p["remaining_change_per_layer_K"]
    assert len(rows) == 3 and len(rows[0]) == 8
    assert rows[0][-1] > rows[0][0] > 0, "the anomaly leaves from the top"


def test_no_state_and_no_constants_says_why(demo):
    """physics.mode none reads no soil water: the ledger says why, with no invented default."""
    p = _preview(demo, "{kind: uniform}")["persistence"]
    assert p["remaining_fraction"] is None and "physics.mode" in p["not_estimated"]


def test_persistence_settings_do_not_change_the_recipe_hash(tmp_path):
    """The persistence section is report-only: the canonical hash ignores it."""
    a = tmp_path / "a.yaml"
    a.write_text(BOX.replace("PROFILE", "{kind: uniform}"))
    b = tmp_path / "b.yaml"
    b.write_text(a.read_text() + "persistence: {conductivity_W_m_K: 1.0, horizons_days: [3, 9]}\n")
    ra, rb = load_recipe(a), load_recipe(b)
    assert ra.sha256 == rb.sha256 == canonical_hash(ra.data)
    assert rb.data["persistence"]["horizons_days"] == [3, 9]


def test_horizons_must_increase(work, capsys):
    text = swap("    profile: {kind: exponential, efolding_m: 0.5}\n",
                "    profile: {kind: exponential, efolding_m: 0.5}\npersistence: {horizons_days: [30, 7]}\n")
    rec = recipe(work, text)
    refused(capsys, ["preview", rec, "--input", work / "in.nc"], "persistence.horizons_days", "must increase",
            folder=work)


def test_preview_json_and_text_show_persistence(demo, tmp_path, capsys):
    from initgen.cli import main

    rc = main(["preview", str(demo / "demo-cold-highland.yaml"), "--input", str(demo / "demo-restart.nc"),
               "--json", str(tmp_path / "p.json")])
    out = capsys.readouterr().out
    assert rc == 0
    assert "persistence (idealised conduction bound" in out and "after 30 d" in out
    led = json.loads((tmp_path / "p.json").read_text())
    assert len(led["persistence"]["remaining_fraction"]) == 4
    assert led["layers"]["bottom_m"][-1] == pytest.approx(INTERFACES[-1], rel=1e-6)


SHIPPED = sorted(p.name for p in RECIPES.glob("*.yaml"))


@pytest.mark.parametrize("name", SHIPPED)
def test_every_shipped_recipe_previews_a_persistence_estimate(demo, name):
    """The done-when of issue 17: each shipped recipe's preview shows the persistence line with
    numbers (members: the first member), and the fractions fall with time (heat only leaves)."""
    rec = load_recipe(demo / name)
    if rec.data.get("members"):
        led = api.preview_members(rec, demo / "demo-restart.nc", members=None)[0][1]
    else:
        led = api.preview(rec, demo / "demo-restart.nc")
    text = api.ledger_text(led)
    assert "persistence (idealised conduction bound" in text and "after 60 d" in text, text
    fr = led["persistence"]["remaining_fraction"]
    assert all(0 < b < a < 1 for a, b in zip(fr, fr[1:]))


def test_markdown_report_has_the_persistence_line(demo):
    """run_demo writes the preview report of the cold-highland recipe."""
    assert "persistence (idealised conduction bound" in (demo / "preview" / "preview.md").read_text()
