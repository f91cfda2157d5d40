"""initgen collate: two invented models (two grids, two layer structures) side by side."""

from __future__ import annotations

import csv
import io
import json
import shutil

import pytest

from initgen import api
from initgen.cli import main
from initgen.outputs.collate import band_means, compare

import filemaker
from clikit import listing, refused


def test_band_overlap_hand_computed():
    """Thickness-weighted overlap, worked by hand: layers 0-5, 5-20, 20-60, 60-150 cm holding
    1, 2, 3, 4 K give 0-10 cm (5x1 + 5x2)/10 = 1.5; 10-40 cm (10x2 + 20x3)/30 = 2.6667;
    40-100 cm (20x3 + 40x4)/60 = 3.6667; 100-200 cm 4 over half the band (coverage 0.5)."""
    got = band_means([0.0, 0.05, 0.2, 0.6], [0.05, 0.2, 0.6, 1.5], [1.0, 2.0, 3.0, 4.0])
    assert [b["mean"] for b in got] == pytest.approx([1.5, 8.0 / 3.0, 11.0 / 3.0, 4.0])
    assert [b["coverage"] for b in got] == pytest.approx([1.0, 1.0, 1.0, 0.5])
    # a model reaching 30 cm: the deeper bands are empty, not zero
    shallow = band_means([0.0, 0.1], [0.1, 0.3], [1.0, 2.0])
    assert shallow[1]["mean"] == pytest.approx(2.0) and shallow[1]["coverage"] == pytest.approx(2 / 3)
    assert shallow[2]["mean"] is None and shallow[3]["mean"] is None
    # a layer without a value (no cell in the region) does not count as zero
    assert band_means([0.0, 0.05], [0.05, 0.1], [None, 3.0])[0]["mean"] == pytest.approx(3.0)


def test_band_flags_against_the_median():
    rows = [{"label": n, "recipe_sha256": "a", "recipe_name": "r", "issues": [], "band_flags": [],
             "bands": [{"mean": v}, {"mean": None}, {"mean": None}, {"mean": None}]}
            for n, v in (("a", -1.0), ("b", -1.1), ("c", -2.0))]
    col = compare(rows, threshold=0.25)
    assert col["band_medians_K"][0] == pytest.approx(-1.1)
    assert [bool(r["band_flags"]) for r in col["submissions"]] == [False, False, True]
    assert "0-10 cm" in col["submissions"][2]["band_flags"][0] and col["ok"]


@pytest.fixture(scope="module")
def two_models(tmp_path_factory, demo_folder):
    """The demo's output (regular 0.5-degree grid, 8 layers to 3.1 m) and the same recipe applied
    to a second invented model (unstructured columns, 6 layers to 1 m)."""
    root = tmp_path_factory.mktemp("collate")
    demo = root / "model-a"
    shutil.copytree(demo_folder, demo)  # the demo, made once per session (conftest)
    b = root / "model-b"
    b.mkdir()
    filemaker.second_model(b / "restart.nc")
    api.apply(demo / "demo-cold-highland.yaml", b / "restart.nc", b / "restart.cold.nc")
    other = root / "other-recipe"
    other.mkdir()
    api.apply(demo / "demo-warm-damping.yaml", demo / "demo-restart.nc", other / "warm.nc")
    return root


def _run(argv, capsys):
    capsys.readouterr()
    rc = main([str(a) for a in argv])
    return rc, capsys.readouterr()


def test_two_models_one_recipe(two_models, tmp_path, capsys):
    a = two_models / "model-a" / "demo-restart.cold-highland.nc.provenance.json"
    b = two_models / "model-b"
    out = tmp_path / "col"
    rc, cap = _run(["collate", a, b, "--out", out, "--label", f"model-b={b / 'restart.cold.nc.provenance.json'}"],
                   capsys)
    assert rc == 0, cap
    assert sorted(p.name for p in out.iterdir()) == ["collation.csv", "collation.html", "collation.json"]
    col = json.loads((out / "collation.json").read_text())
    assert col["ok"] and len(col["submissions"]) == 2
    rows = {r["label"]: r for r in csv.DictReader(io.StringIO((out / "collation.csv").read_text()))}
    assert set(rows) == {"model-a/demo-restart.cold-highland.nc", "model-b"}
    ra, rb = rows["model-a/demo-restart.cold-highland.nc"], rows["model-b"]
    assert (ra["grid_kind"], rb["grid_kind"]) == ("regular", "points")
    assert rb["dT_100_200cm_K"] == "" and ra["dT_100_200cm_K"] != "", "a band model b does not reach is empty"
    for r in (ra, rb):
        assert float(r["dT_0_10cm_K"]) < 0 and float(r["heat_change_J_m2"]) < 0 and float(r["ice_change_kg_m2"]) > 0
    # the same anomaly at the same depths: the two models' near-surface bands agree within 5 %
    assert float(rb["dT_0_10cm_K"]) == pytest.approx(float(ra["dT_0_10cm_K"]), rel=0.05)
    page = (out / "collation.html").read_text()
    assert page.count("data:image/png;base64,") == 3
    for external in ("http://", "https://", "<script", "<link"):
        assert external not in page
    # the shallower column loses its heat faster through the held surface (no flux at 1 m)
    fa = col["submissions"][0]["persistence_remaining_fraction"]
    fb = col["submissions"][1]["persistence_remaining_fraction"]
    assert fb[2] < fa[2]


def test_differing_records_exit_3_one_line_each(two_models, tmp_path, capsys):
    """Another recipe's record and a record whose output was edited: exit 3, one line each."""
    edited = tmp_path / "edited"
    shutil.copytree(two_models / "model-b", edited)
    data = bytearray((edited / "restart.cold.nc").read_bytes())
    data[len(data) // 2] ^= 0xFF
    (edited / "restart.cold.nc").write_bytes(bytes(data))
    a = two_models / "model-a" / "demo-restart.cold-highland.nc.provenance.json"
    out = tmp_path / "col"
    rc, cap = _run(["collate", a, two_models / "model-b", edited / "restart.cold.nc.provenance.json",
                    two_models / "other-recipe", "--out", out], capsys)
    assert rc == 3
    lines = [ln for ln in cap.out.splitlines() if ln.startswith("differs: ")]
    assert len(lines) == 2, cap.out
    assert any("other-recipe" in ln and "recipe 'demo-warm-damping'" in ln for ln in lines)
    assert any("edited" in ln and "no longer matches the recorded sha256" in ln for ln in lines)
    col = json.loads((out / "collation.json").read_text())
    assert not col["ok"] and len(col["submissions"]) == 4


def test_not_a_record_exit_2_nothing_written(two_models, tmp_path, capsys):
    fake = tmp_path / "notes.provenance.json"
    fake.write_text(json.dumps({"hello": 1}))
    a = two_models / "model-a" / "demo-restart.cold-highland.nc.provenance.json"
    refused(capsys, ["collate", a, fake, "--out", tmp_path / "col"], "not an initgen provenance record",
            folder=tmp_path)
    refused(capsys, ["collate", a, tmp_path / "missing.json", "--out", tmp_path / "col"], "not found",
            folder=tmp_path)
    refused(capsys, ["collate", a, "--out", tmp_path / "col", "--label", "nolabel"], "NAME=RECORD",
            folder=tmp_path)
    before = listing(tmp_path)
    assert "col" not in before


def test_ensemble_manifest_and_folder(two_models, tmp_path, capsys):
    """A manifest names its members' records; a folder holding both finds each record once."""
    demo = two_models / "model-a"
    ens = tmp_path / "ens"
    api.apply_ensemble(demo / "demo-warm-cold-pairs.yaml", [demo / "demo-restart.nc"], ens,
                       members=["warm-x1.0", "cold-x1.0"], workers=1)
    rc, cap = _run(["collate", ens / "manifest.json", "--out", tmp_path / "c1"], capsys)
    assert rc == 0, cap
    rc, cap = _run(["collate", ens, "--out", tmp_path / "c2"], capsys)
    col = json.loads((tmp_path / "c2" / "collation.json").read_text())
    assert rc == 0 and sorted(r["member"] for r in col["submissions"]) == ["cold-x1.0", "warm-x1.0"]
    warm, cold = sorted(col["submissions"], key=lambda r: r["member"], reverse=True)
    assert warm["bands"][0]["mean"] > 0 > cold["bands"][0]["mean"]


def test_record_without_layer_geometry_differs(two_models, tmp_path, capsys):
    """A record made before initgen recorded layer tops and bottoms cannot be banded: exit 3."""
    src = two_models / "model-b"
    old = tmp_path / "old"
    shutil.copytree(src, old)
    rec_path = old / "restart.cold.nc.provenance.json"
    rec = json.loads(rec_path.read_text())
    del rec["ledger"]["layers"]
    rec_path.write_text(json.dumps(rec))
    rc, cap = _run(["collate", two_models / "model-a" / "demo-restart.cold-highland.nc.provenance.json", rec_path,
                    "--out", tmp_path / "col"], capsys)
    assert rc == 3 and "no layer geometry" in cap.out
    col = json.loads((tmp_path / "col" / "collation.json").read_text())
    assert all(b["mean"] is None for b in col["submissions"][1]["bands"])


def test_more_refusals_exit_2_nothing_written(two_models, tmp_path, capsys):
    """Bad options and arguments: one line, exit 2, no file written or changed (error catalogue)."""
    a = two_models / "model-a" / "demo-restart.cold-highland.nc.provenance.json"
    (tmp_path / "empty").mkdir()
    (tmp_path / "afile").write_text("x")
    (tmp_path / "manifest.json").write_text("{}")
    cases = [
        (["--threshold", "-1"], "--threshold"),
        (["--out", tmp_path / "afile"], "is not a folder"),
        ([tmp_path / "empty"], "holds no provenance record"),
        ([tmp_path / "manifest.json"], "not an initgen ensemble manifest"),
        (["--label", f"x={a}", "--label", f"x={two_models / 'model-b' / 'restart.cold.nc.provenance.json'}"],
         "used twice"),
    ]
    for extra, phrase in cases:
        out = [] if "--out" in extra else ["--out", tmp_path / "col"]
        refused(capsys, ["collate", a, *extra, *out], phrase, folder=tmp_path)
