"""initgen.science.units: unit parsing through cf-units (UDUNITS-2), against the SI definitions.

Sources: BIPM, The International System of Units (SI Brochure, 9th ed., 2019): T/K = t/degC +
273.15, 1 hPa = 100 Pa, 1 cm = 0.01 m; CF conventions 1.11 section 3.1 (units are UDUNITS
strings). 1 mm of liquid water over 1 m2 weighs 1 kg (density 1000 kg m-3, common practice).
"""

from __future__ import annotations

import pytest

from initgen.science import units
from initgen.errors import InputError
from initgen.science.soil.conversion import temperature_to_kelvin
from initgen.science.soil.conversion import volumetric_to_water
from initgen.science.soil.conversion import water_to_volumetric


@pytest.mark.parametrize("text,offset", [("K", 0.0), ("kelvin", 0.0), ("degrees_K", 0.0), ("degC", 273.15),
                                         ("degree_Celsius", 273.15), ("C", 273.15), ("deg C", 273.15)])
def test_temperatures_to_kelvin(text, offset):
    assert units.temperature_scale_offset(text) == (1.0, offset)


@pytest.mark.parametrize("text", ["degF", "furlongs", "", "kg m-2"])
def test_non_temperatures_are_none(text):
    assert units.temperature_scale_offset(text) is None


def test_lengths_and_pressures():
    assert units.metres_per("cm") == pytest.approx(0.01, rel=1e-15)
    assert units.metres_per("mm") == pytest.approx(0.001, rel=1e-15)
    assert units.pascal_per("hPa") == pytest.approx(100.0, rel=1e-15)
    assert units.pascal_per("kPa") == pytest.approx(1000.0, rel=1e-15)
    assert units.metres_per("kPa") is None and units.pascal_per("m") is None


@pytest.mark.parametrize("text,kind,factor", [("kg m-2", "mass", 1.0), ("kg/m2", "mass", 1.0), ("g m-2", "mass", 1e-3),
                                              ("mm", "mass", 1.0), ("cm", "mass", 10.0), ("m3 m-3", "volume", 1.0),
                                              ("1", "volume", 1.0), ("fraction", "volume", 1.0)])
def test_water_amounts(text, kind, factor):
    got = units.water_amount(text)
    assert got[0] == kind and got[1] == pytest.approx(factor, rel=1e-12)


@pytest.mark.parametrize("text", ["kg kg-1", "%", "percent", "furlongs", "g", "K"])
def test_water_amounts_refused(text):
    assert units.water_amount(text) is None


def test_water_in_grams_per_m2_is_converted():
    """500 g m-2 of water in a 0.1 m layer: 0.5 kg m-2 / (1000 kg m-3 x 0.1 m) = 0.005 m3 m-3."""
    assert water_to_volumetric(500.0, "g m-2", 0.1) == pytest.approx(0.005, rel=1e-12)
    assert volumetric_to_water(0.005, "g m-2", 0.1) == pytest.approx(500.0, rel=1e-12)


def test_unknown_temperature_units_name_the_layout_key():
    with pytest.raises(InputError, match=r"'TS'.*units.soil_temperature"):
        temperature_to_kelvin(280.0, "degF", name="TS", key="units.soil_temperature")
