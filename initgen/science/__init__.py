"""Floor 2 (DEVELOPERS.md), the science: constants, units, geodesy, layer geometry, regions, profiles, sources,
soil physics and heat conduction. Pure numpy on arrays: no netCDF, no recipe documents."""
