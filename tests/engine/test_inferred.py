"""What initgen infers or guesses is said where the user reads the result: in the ledger's notes
(stored in every provenance record) and in the printed ledger, not only in a warning (the
project's rule: no silent approximation)."""

from __future__ import annotations

import warnings

import netCDF4

from initgen import api
import filemaker as fm
from clikit import box_recipe_text, refused


def test_a_temperature_without_units_is_a_guess_the_ledger_names(tmp_path):
    f = fm.regular(tmp_path / "in.nc")
    with netCDF4.Dataset(f, "a") as ds:
        ds["tsoil"].delncattr("units")
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text())
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        led = api.preview(rec, f)
    assert any("no units attribute" in str(w.message) for w in caught)
    assert "taken as K (a guess" in led["notes"]["units.soil_temperature"]
    assert "inferred (units.soil_temperature): variable 'tsoil' has no units attribute" in api.ledger_text(led)


def test_a_temperature_with_units_adds_no_note(tmp_path):
    f = fm.regular(tmp_path / "in.nc")
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text())
    led = api.preview(rec, f)
    assert not any(k.startswith("units.") for k in led.get("notes", {}))
    assert "inferred (units." not in api.ledger_text(led)


def test_celsius_numbers_without_units_are_refused_with_the_way_to_say_so(tmp_path, capsys):
    # the guess (K) meets numbers no soil has in K: the refusal names the units key that fixes it
    f = fm.regular(tmp_path / "in.nc")
    with netCDF4.Dataset(f, "a") as ds:
        ds["tsoil"].delncattr("units")
        ds["tsoil"][:] = ds["tsoil"][:] - 273.15
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text())
    refused(capsys, ["apply", rec, "--input", f, "--output", tmp_path / "out.nc"], "not a temperature",
            "no units attribute and was read as K", "units.soil_temperature: degC", folder=tmp_path)


def test_celsius_numbers_declared_as_kelvin_keep_the_plain_refusal(tmp_path, capsys):
    f = fm.regular(tmp_path / "in.nc")
    with netCDF4.Dataset(f, "a") as ds:
        ds["tsoil"][:] = ds["tsoil"][:] - 273.15  # units still say K
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text())
    line = refused(capsys, ["apply", rec, "--input", f, "--output", tmp_path / "out.nc"], "not a temperature",
                   "declare it as _FillValue or fix the file", folder=tmp_path)
    assert "degC" not in line
