"""Floor 3 (DEVELOPERS.md), files: the only place that opens netCDF files (stores, packing, atomic writes); the
model's grid, layers and roles as a file holds them, its water convention and the shipped files."""
