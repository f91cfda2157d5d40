"""Depth coordinates in any length unit (UDUNITS-2 through cf-units, the CF conventions' unit
system): the layer geometry read from a file whose depth axis is in feet or centimetres equals the
one read from the same file in metres. 1 ft = 0.3048 m exactly (international foot, NIST SP 811,
2008, appendix B.8)."""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from initgen import api
import filemaker as fm
from clikit import box_recipe_text


def _layers(path, tmp_path):
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text(-25, 25, -15, 15))
    with api.open_plan(rec, path) as p:
        lay = p.model.layers
        return np.asarray(lay.top_m), np.asarray(lay.bottom_m), np.asarray(lay.node_m)


@pytest.mark.parametrize("units, per_metre", [("ft", 1 / 0.3048), ("cm", 100.0), ("millimetres", 1000.0)])
def test_depth_axis_in_any_length_unit(tmp_path, units, per_metre):
    ref = fm.water_file(tmp_path / "m.nc", cf_names=True)
    other = fm.water_file(tmp_path / f"{units}.nc", cf_names=True)
    with netCDF4.Dataset(other, "a") as ds:
        ds["soil_layer"].units = units
        ds["soil_layer"][:] = ds["soil_layer"][:] * per_metre
        ds["soil_layer_bnds"][:] = ds["soil_layer_bnds"][:] * per_metre
    for a, b in zip(_layers(ref, tmp_path), _layers(other, tmp_path)):
        np.testing.assert_allclose(b, a, rtol=1e-12)


def test_a_depth_axis_in_no_length_unit_is_not_taken_for_depth(tmp_path):
    f = fm.water_file(tmp_path / "deg.nc", cf_names=True)
    with netCDF4.Dataset(f, "a") as ds:
        ds["soil_layer"].units = "degrees"
        del ds["soil_layer"].standard_name
    rec = tmp_path / "r.yaml"
    rec.write_text(box_recipe_text(-25, 25, -15, 15))
    with api.open_plan(rec, f) as p:
        assert p.model.layers is None  # no geometry guessed from an axis that is no length
