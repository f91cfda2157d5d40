"""The README's promises: the two set-up commands, the recipe reference, the demo."""

from __future__ import annotations

import hashlib
import json
import re

import netCDF4
import numpy as np

from initgen.config.recipe import RECIPE
from initgen.config.schema import walk_reference

from clikit import ROOT

README = (ROOT / "README.md").read_text()


def test_readme_opens_with_job_and_two_commands():
    blocks = re.findall(r"```\n(.*?)```", README, re.S)
    assert blocks[0].strip().splitlines() == [
        "python -m pip install . && initgen demo --out initgen-demo",
        "python -m pip install '.[test]' && python -m pytest",
    ]
    ci = (ROOT / ".ci" / "run").read_text()
    assert "python -m pip install '.[test]' && python -m pytest" in ci


def test_recipe_reference_keys_exist_in_schema():
    known = {row[0].replace("[]", "") for row in walk_reference(RECIPE)}
    table = README[README.index("### Recipe reference"):README.index("## The physics")]
    for line in table.splitlines():
        if not line.startswith("| `"):
            continue
        cell = line.split("|")[1]
        keys = re.findall(r"`([^`]+)`", cell)
        first = keys[0].replace("[]", "")
        prefix = first.rsplit(".", 1)[0] if "." in first else ""
        for k in keys:
            k = k.replace("[]", "")
            full = k if (k == first or "." in k) else f"{prefix}.{k}"
            assert full in known, f"README names {full}, which the schema does not have"


def test_demo_changes_only_recipe_variables_inside_region(demo_folder):
    src = demo_folder / "demo-restart.nc"
    out = demo_folder / "demo-restart.cold-highland.nc"
    prov = json.loads((demo_folder / "demo-restart.cold-highland.nc.provenance.json").read_text())
    assert prov["input"]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
    assert prov["output"]["sha256"] == hashlib.sha256(out.read_bytes()).hexdigest()
    changed_vars = set(prov["ledger"]["variables"])
    with netCDF4.Dataset(src) as A, netCDF4.Dataset(out) as B:
        A.set_auto_maskandscale(False)
        B.set_auto_maskandscale(False)
        land = np.array(A["landfrac"][:]) > 0
        for name in A.variables:
            a, b = np.array(A[name][:]), np.array(B[name][:])
            if name not in changed_vars:
                assert np.array_equal(a, b), name
                continue
            diff = a != b
            assert diff.any(), name
            # only land cells change (the last two axes are lat, lon)
            assert not diff[..., ~land].any(), name
    led = prov["ledger"]
    # energy mode on frozen upper layers: ice forms and latent heat is released (negative)
    assert led["physics"]["mode"] == "energy"
    assert led["physics"]["frozen_region_total_kg"] > 0
    assert led["physics"]["latent_region_total_J"] < 0
    assert (demo_folder / "summary.txt").read_text().startswith("initgen demo")
