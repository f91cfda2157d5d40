"""The built-in demo: an invented highland on an invented model grid.

The scenario is our own: a regional grid of 0.5 degrees that straddles the 180 degree meridian
(longitudes 150..210 degrees east, stored in the 0..360 convention), an invented continent with a
high plateau near the dateline, eight soil layers, frozen upper layers on the plateau at the
end of winter, snow, and ocean cells marked with fill values. Nothing here is real data.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from initgen import api
from initgen.errors import InputError
from initgen.io.atomic import create_netcdf, write_atomic_text
from initgen.io.shipped import shipped_dir, shipped_file
from initgen.reports.preview import preview_report
from initgen.science.soil import freezing as soil_freezing

NODES = np.array([0.025, 0.075, 0.15, 0.3, 0.55, 0.9, 1.5, 2.5])
INTERFACES = np.array([0.0, 0.05, 0.1, 0.2, 0.4, 0.7, 1.1, 1.9, 3.1])
FILL = -9999.0
LOAM = dict(porosity=0.451, psi_sat_m=0.478, b=5.39)  # Clapp and Hornberger (1978), Table 2


def demo_fields(nlon: int = 120, nlat: int = 80, shift_K: float = 0.0) -> dict:
    lon = 150.25 + 0.5 * np.arange(nlon) * (120 / nlon)
    lat = 20.25 + 0.5 * np.arange(nlat) * (80 / nlat)
    LON, LAT = np.meshgrid(lon, lat)
    # invented continent: a smooth blob, with a ragged coast
    x = (LON - 180.0) / 22.0
    y = (LAT - 40.0) / 14.0
    r = np.hypot(x, y) + 0.08 * np.sin(5 * np.arctan2(y, x)) + 0.05 * np.cos(3 * LON * np.pi / 180 * 7)
    landfrac = np.clip((1.0 - r) / 0.08 + 0.5, 0.0, 1.0)
    landfrac[landfrac < 0.05] = 0.0
    # a high plateau near the dateline, with a gentle lowland around it
    plateau = np.hypot((LON - 181.0) / 7.0, (LAT - 38.5) / 4.5)
    elev = 300.0 + 4200.0 / (1.0 + np.exp((plateau - 1.0) / 0.12)) + 400.0 * (1.0 - np.clip(r, 0, 1))
    elev = np.where(landfrac > 0, elev, 0.0)
    land = landfrac > 0
    # end of winter: cold surface on the plateau, warmer deep soil
    t_surf = 290.0 - 0.0055 * elev - 0.35 * (LAT - 40.0) + shift_K
    t_deep = 285.0 - 0.003 * elev - 0.2 * (LAT - 40.0) + 0.5 * shift_K
    z = NODES[:, None, None]
    tsoil = t_deep + (t_surf - t_deep) * np.exp(-z / 0.6)
    dz = np.diff(INTERFACES)[:, None, None]
    total = 0.30 * np.ones_like(tsoil)  # m3 m-3, below the loam porosity
    liq_max = soil_freezing.supercooled_liquid_max(tsoil, LOAM["porosity"], LOAM["psi_sat_m"], LOAM["b"])
    liq = np.minimum(total, liq_max)
    wliq = liq * dz * 1000.0
    wice = (total - liq) * dz * 1000.0
    snow = np.where(land & (t_surf < 273.15), 40.0 + 0.02 * elev, 0.0)
    snow_depth = snow / 250.0
    tskin = np.where(snow > 0, np.minimum(t_surf - 1.0, 272.0), t_surf)
    tsnow = np.stack([np.minimum(t_surf - 1.5, 272.5), np.minimum(t_surf - 0.5, 273.0)])
    for arr in (tsoil, wliq, wice):
        arr[:, ~land] = FILL
    for arr in (tskin, snow, snow_depth):
        arr[~land] = FILL
    tsnow[:, ~land] = FILL
    return dict(lon=lon, lat=lat, landfrac=landfrac, elev=elev, tsoil=tsoil, wliq=wliq, wice=wice,
                snow=snow, snow_depth=snow_depth, tskin=tskin, tsnow=tsnow)


def write_demo_restart(path: Path, nlon: int = 120, nlat: int = 80, fmt: str = "NETCDF4",
                       cold_year_K: float = 0.0) -> Path:
    """Write the demo restart file to ``path`` (``cold_year_K`` shifts the year's temperatures)."""
    f = demo_fields(nlon, nlat, shift_K=cold_year_K)

    def build(ds):
        ds.title = "initgen demo restart: an invented highland on an invented grid (synthetic data)"
        ds.Conventions = "CF-1.8"
        ds.history = "created by initgen demo (synthetic)"
        ds.createDimension("time", 1)
        ds.createDimension("depth", NODES.size)
        ds.createDimension("snowlayer", 2)
        ds.createDimension("lat", f["lat"].size)
        ds.createDimension("lon", f["lon"].size)
        ds.createDimension("nv", 2)
        v = ds.createVariable("time", "f8", ("time",))
        v.units = "days since 2001-01-01"
        v.standard_name = "time"
        v[:] = [59.0]
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units, v.standard_name, v.axis = "degrees_north", "latitude", "Y"
        v[:] = f["lat"]
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units, v.standard_name, v.axis = "degrees_east", "longitude", "X"
        v[:] = f["lon"]
        v = ds.createVariable("depth", "f4", ("depth",))
        v.units, v.standard_name, v.positive, v.bounds = "m", "depth", "down", "depth_bnds"
        v[:] = NODES
        v = ds.createVariable("depth_bnds", "f4", ("depth", "nv"))
        v[:] = np.stack([INTERFACES[:-1], INTERFACES[1:]], axis=1)

        def var(name, dims, data, units, sn, long, dtype="f4", **kw):
            v = ds.createVariable(name, dtype, dims, fill_value=FILL if dtype == "f4" else None, **kw)
            v.units = units
            v.standard_name = sn
            v.long_name = long
            v[:] = data
            return v

        var("tsoil", ("time", "depth", "lat", "lon"), f["tsoil"][None], "K", "soil_temperature",
            "soil temperature at the layer node", zlib=True, complevel=4, chunksizes=(1, NODES.size, 40, 60))
        var("wliq", ("time", "depth", "lat", "lon"), f["wliq"][None], "kg m-2",
            "liquid_water_content_of_soil_layer", "liquid water in the soil layer")
        var("wice", ("time", "depth", "lat", "lon"), f["wice"][None], "kg m-2",
            "frozen_water_content_of_soil_layer", "ice in the soil layer")
        v = ds.createVariable("landfrac", "f4", ("lat", "lon"))
        v.units, v.standard_name = "1", "land_area_fraction"
        v[:] = f["landfrac"]
        v = ds.createVariable("zsurf", "f4", ("lat", "lon"))
        v.units, v.standard_name = "m", "surface_altitude"
        v[:] = f["elev"]
        var("tskin", ("time", "lat", "lon"), f["tskin"][None], "K", "surface_temperature", "skin temperature")
        var("snow_amount", ("time", "lat", "lon"), f["snow"][None], "kg m-2", "surface_snow_amount", "snow water equivalent")
        var("snow_thick", ("time", "lat", "lon"), f["snow_depth"][None], "m", "surface_snow_thickness", "snow depth")
        var("tsnow", ("time", "snowlayer", "lat", "lon"), f["tsnow"][None], "K", "temperature_in_surface_snow",
            "snow layer temperature")
        # a packed variable the demo recipe does not touch: it must come out bit-identical
        v = ds.createVariable("albedo_index", "i2", ("lat", "lon"), fill_value=np.int16(-32767))
        v.scale_factor, v.add_offset, v.units, v.long_name = 0.0001, 0.0, "1", "surface albedo (packed)"
        v[:] = np.where(f["landfrac"] > 0, 0.2 + 0.0001 * f["elev"], 0.06)

    create_netcdf(Path(path), build, fmt=fmt)
    return Path(path)


DEMO_RECIPE = "demo-cold-highland.yaml"


def _write_field(path: Path, lon: np.ndarray, lat: np.ndarray, values: np.ndarray, name: str, long_name: str) -> None:
    def build(ds):
        ds.title = f"initgen demo: {long_name} (synthetic)"
        ds.Conventions = "CF-1.8"
        ds.createDimension("lat", lat.size)
        ds.createDimension("lon", lon.size)
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units, v.standard_name = "degrees_north", "latitude"
        v[:] = lat
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units, v.standard_name = "degrees_east", "longitude"
        v[:] = lon
        v = ds.createVariable(name, "f4", ("lat", "lon"))
        v.units, v.long_name = "K", long_name
        v[:] = values

    create_netcdf(path, build)


def write_demo_extras(out: Path) -> list[Path]:
    """Auxiliary demo inputs the example recipes use (all synthetic, on grids of their own).

    - ``demo-anomaly.nc``: an 'observed' soil temperature anomaly on a coarser 1-degree grid in the
      -180..180 convention (so interpolation must wrap the dateline);
    - ``demo-model-clim.nc`` / ``demo-reference-clim.nc``: a model's climatology of the top soil
      temperature and a reference one, for the bias-compensating start;
    - ``demo-restart-donor.nc``: the demo restart of another (colder) year, for the donor blend.
    """
    out = Path(out)
    lon = np.arange(-179.5, 180.0, 1.0)
    lat = np.arange(10.5, 70.0, 1.0)
    LON, LAT = np.meshgrid(lon, lat)
    dist = np.hypot((np.mod(LON, 360) - 181.0) / 9.0, (LAT - 38.5) / 6.0)
    anomaly = -4.0 * np.exp(-dist**2) + 0.5 * np.sin(np.radians(LON) * 3)
    _write_field(out / "demo-anomaly.nc", lon, lat, anomaly, "tsoil_anomaly", "top soil temperature anomaly")
    ref = 280.0 - 0.6 * (LAT - 40.0) - 12.0 * np.exp(-dist**2)
    model = ref + 2.5 * np.exp(-dist**2) + 0.3
    _write_field(out / "demo-reference-clim.nc", lon, lat, ref, "tsoil_top", "reference top soil temperature climatology")
    _write_field(out / "demo-model-clim.nc", lon, lat, model, "tsoil_top", "model top soil temperature climatology")
    donor = out / "demo-restart-donor.nc"
    write_demo_restart(donor, cold_year_K=-2.5)
    return [out / "demo-anomaly.nc", out / "demo-reference-clim.nc", out / "demo-model-clim.nc", donor]


def run_demo(out: Path) -> str:
    """Write the demo input, apply the shipped demo recipe, and write a summary and a preview report.

    Returns the summary text (also written to ``summary.txt`` in ``out``). The demo folder is
    the demo's own: running it again regenerates its files.
    """

    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: exists and is not a folder; give a folder for --out")
    out.mkdir(parents=True, exist_ok=True)
    recipe = shipped_file("recipes", DEMO_RECIPE)
    if recipe is None:
        raise InputError(f"the shipped recipe {DEMO_RECIPE} is missing from this installation; reinstall initgen")
    src = out / "demo-restart.nc"
    dst = out / "demo-restart.cold-highland.nc"
    # copy the shipped recipes and the outline beside the data, so every example runs there

    for example in sorted(shipped_dir("recipes").glob("*.yaml")):
        write_atomic_text(out / example.name, example.read_text(encoding="utf-8"))
    mask = shipped_file("masks", "demo-highland.geojson")
    if mask is not None:
        write_atomic_text(out / mask.name, mask.read_text(encoding="utf-8"))
    recipe = out / DEMO_RECIPE
    write_demo_restart(src)
    write_demo_extras(out)
    record = api.apply(recipe, src, dst, force=True)
    led = record["ledger"]
    text = "\n".join([
        "initgen demo: an invented highland on an invented grid (synthetic data)",
        f"recipe:  {recipe} (sha256 {record['recipe']['sha256']})",
        f"input:   {src}",
        f"output:  {dst}",
        f"record:  {dst}.provenance.json",
        "",
        api.ledger_text(led),
    ])
    try:  # the preview report draws with matplotlib
        rep = preview_report(recipe, src, None, out / "preview", ledger=led)
        text += f"\npreview report: {rep.parent / 'report.html'} (one page to open offline; Markdown: {rep.name})"
    except ImportError:
        pass
    write_atomic_text(out / "summary.txt", text + "\n")
    write_atomic_text(out / "ledger.json", json.dumps(led, indent=2) + "\n")
    return text
