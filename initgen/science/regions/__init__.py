"""Regions and horizontal weights: hard masks and tapered edges on any lon/lat grid.

Shapes are shapely geometries in longitude/latitude degrees. Edges are straight lines in
lon/lat (as in GeoJSON and regionmask), so an edge along constant latitude follows the
parallel. Any longitude convention is accepted for shapes and grids alike: internally each
shape is wrapped into [-180, 180] and repeated at +-360 degrees, so a region that crosses the
180-degree meridian, or is written in 0..360 longitudes, masks any grid the same way.

Weights are pure functions of lon/lat arrays (2-D regular or curvilinear grids, or 1-D point
lists) and a shape:

* :func:`~initgen.science.regions.mask.hard_mask` - which points lie in the region (regionmask's edge convention);
* :func:`~initgen.science.regions.mask.boundary_distance_km` - great-circle distance to the region's boundary;
* :func:`~initgen.science.regions.mask.taper_weight` - 1 in the region, raised-cosine decay across the boundary;
* :func:`~initgen.science.regions.factors.elevation_ramp`, :func:`~initgen.science.regions.factors.land_weight` - other horizontal factors;
* :func:`~initgen.science.regions.factors.check_coverage` - fail clearly when a region holds no grid point.

The modules: :mod:`.shapes` (building shapes), :mod:`.boundary` (normalised shapes and their
boundaries), :mod:`.mask` (masks, distances, tapers) and :mod:`.factors` (elevation, land, coverage).
"""
