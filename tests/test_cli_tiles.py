"""A model stored as tiles: one ``apply`` with several ``--input`` files and a recipe without members.

The reference is the same grid in one piece (``filemaker.tiles``: ``whole.nc`` holds the tiles'
columns side by side; here its soil temperature is set to the tiles' values, so the two inputs
hold the same numbers). The tapered region straddles the tile edges, so a tile sees the region's
distance from cells in other tiles; the tiles' outputs, side by side, must equal the one-file
run's output exactly, value for value as stored.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from initgen import api
from initgen.cli import main
from initgen.errors import InputError
from initgen.io.shipped import shipped_dir
import filemaker as fm
from clikit import read_raw, sha
from clikit import recipe, refused, swap  # the error catalogue's recipe and refusal check

LAYOUTS = shipped_dir("recipes") / "layouts"


@pytest.fixture
def tiled(tmp_path):
    parts = fm.tiles(tmp_path, ntiles=3)
    whole = np.concatenate([read_raw(r, "tsoil") for r, _ in parts], axis=-1)  # (soil, y, x)
    with netCDF4.Dataset(tmp_path / "whole.nc", "a") as ds:
        ds["tsoil"].set_auto_maskandscale(False)
        ds["tsoil"][:] = whole
    shutil.copy(LAYOUTS / "tiled-grid-files.yaml", tmp_path / "tiles.yaml")
    (tmp_path / "whole.yaml").write_text(Path(LAYOUTS / "separate-grid-file.yaml").read_text()
                                         .replace("path: grid.nc", "path: whole-grid.nc"))
    # the catalogue's box, moved onto the tiles (lon -10 .. 58) with a taper wider than a tile
    recipe(tmp_path, swap("taper_km: 200", "taper_km: 800", swap("lon: [20, 80]", "lon: [5, 30]")))
    (tmp_path / "out").mkdir()
    return tmp_path, [r for r, _ in parts]


def _tiles_argv(work, tiles, output):
    return ["apply", str(work / "r.yaml"), "--layout", str(work / "tiles.yaml"), "--input", *map(str, tiles),
            "--output", str(output), "-q"]


@pytest.mark.parametrize("output", ["out", "out/{input_stem}-perturbed.nc"], ids=["folder", "template"])
def test_tiles_equal_the_one_file_run(tiled, output, capsys):
    work, tiles = tiled
    assert main(["apply", str(work / "r.yaml"), "--layout", str(work / "whole.yaml"), "--input",
                 str(work / "whole.nc"), "--output", str(work / "whole-out.nc"), "-q"]) == 0
    assert main(_tiles_argv(work, tiles, work / output)) == 0
    outs = [work / "out" / (t.name if "{" not in output else t.name.replace(".nc", "-perturbed.nc")) for t in tiles]
    side_by_side = np.concatenate([read_raw(o, "tsoil") for o in outs], axis=-1)
    whole_out = read_raw(work / "whole-out.nc", "tsoil")
    np.testing.assert_array_equal(side_by_side, whole_out)
    changed = side_by_side != read_raw(work / "whole.nc", "tsoil")
    # the region reaches into every tile, with the taper's partial weights across the tile edges
    assert all(changed[..., k * 6:(k + 1) * 6].any() for k in range(3))
    assert all(Path(str(o) + ".provenance.json").is_file() for o in outs)


def test_tiles_need_a_folder_or_a_template(tiled, capsys):
    work, tiles = tiled
    refused(capsys, _tiles_argv(work, tiles, work / "out.nc"), "several inputs", "folder", "{input_stem}",
            folder=work)
    refused(capsys, _tiles_argv(work, tiles, work / "out" / "{stem}.nc"), "{input_stem}", folder=work)
    refused(capsys, _tiles_argv(work, tiles, work / "out" / "same.nc{input_name[0]}"), "same output", folder=work)


def test_a_tile_that_does_not_fit_stops_the_run_before_any_is_written(tiled, capsys):
    """whole.nc has no tile number for the layout's grid_file: refused before tile 1 is written."""
    work, tiles = tiled
    refused(capsys, _tiles_argv(work, [tiles[0], work / "whole.nc"], work / "out"), "grid_file.tile_pattern",
            folder=work)


def test_tiles_never_overwrite_an_input(tiled, capsys):
    work, tiles = tiled
    refused(capsys, _tiles_argv(work, tiles, work), "output is the input file", folder=work)


def test_a_tile_refused_on_its_values_stops_the_run_before_any_is_written(tiled, capsys):
    """The third tile holds Celsius numbers in a variable the layout reads as kelvin (13 'K' in the
    region): the value check is part of the read-only run every tile gets first, so nothing is
    written, not even the first two tiles (the rule: no half-written output)."""
    work, tiles = tiled
    with netCDF4.Dataset(tiles[2], "a") as ds:
        ds["tsoil"][:] = ds["tsoil"][:] - 273.15
    refused(capsys, _tiles_argv(work, tiles, work / "out"), "not a temperature", folder=work)
    assert list((work / "out").iterdir()) == []


@pytest.mark.parametrize("fault", [KeyboardInterrupt, InputError], ids=["interrupt", "write-error"])
def test_a_tile_set_stopped_while_writing_leaves_nothing(tiled, capsys, monkeypatch, fault):
    """The second tile fails while being written (an interrupt, a disk error): the first tile's
    output and record, already published, are removed too; the inputs are unchanged."""
    work, tiles = tiled
    before = {t: sha(t) for t in tiles}
    real, calls = api.apply, []

    def second_fails(*a, **k):
        calls.append(a[1])
        if len(calls) == 2:
            raise fault("stopped while writing the second tile")
        return real(*a, **k)

    monkeypatch.setattr(api, "apply", second_fails)
    code = main(_tiles_argv(work, tiles, work / "out"))
    assert code == (130 if fault is KeyboardInterrupt else 2)
    assert len(calls) == 2
    assert list((work / "out").iterdir()) == []
    assert {t: sha(t) for t in tiles} == before
    err = capsys.readouterr().err
    assert err.count("\n") == 1  # one line
    if fault is InputError:  # says what became of the tile already written
        assert "the 1 tile(s) written before it were removed" in err


def test_apply_tiles_needs_one_output_per_tile(tiled):
    work, tiles = tiled
    with pytest.raises(InputError, match=r"gives 1 output\(s\) for 3 input tile\(s\)"):
        api.apply_tiles(work / "r.yaml", tiles, [work / "out" / "one.nc"], work / "tiles.yaml")
    assert list((work / "out").iterdir()) == []
