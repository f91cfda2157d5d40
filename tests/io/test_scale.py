"""Compressed files: patch in place by default, report the size change, or repack on request."""

from __future__ import annotations

import netCDF4
import numpy as np

from initgen import api
from initgen.cli import main
from initgen.reports.compare import compare

from filemaker import regular
from clikit import read_raw


def test_compressed_patch_reports_growth_and_repack_keeps_values_and_encodings(tmp_path, capsys, make_recipe):
    src = regular(tmp_path / "in.nc", nlon=72, nlat=36, chunked=True)
    rec = make_recipe(-40, 120, -50, 60, anomaly_K=-3.0)
    plain = api.apply(rec, src, tmp_path / "plain.nc")
    io = plain["io"]
    assert io["bytes_rewritten"] > 0 and io["repacked"] is False
    assert io["size_growth_bytes"] == (tmp_path / "plain.nc").stat().st_size - src.stat().st_size
    assert main(["apply", str(rec), "-i", str(src), "-o", str(tmp_path / "packed.nc"), "-q", "-v", "--repack"]) == 0
    assert "(repacked)" in capsys.readouterr().out
    for name in ("tsoil", "other", "landfrac", "lon", "lat"):
        assert np.array_equal(read_raw(tmp_path / "plain.nc", name), read_raw(tmp_path / "packed.nc", name))
    with netCDF4.Dataset(tmp_path / "plain.nc") as a, netCDF4.Dataset(tmp_path / "packed.nc") as b:
        for name in a.variables:
            assert a[name].chunking() == b[name].chunking()
            assert a[name].filters() == b[name].filters()
            assert a[name].dtype == b[name].dtype
    # the repacked file differs from the patched one in nothing a model reads but history
    result = compare(tmp_path / "plain.nc", tmp_path / "packed.nc")
    assert result["ok"], result["differences"]
