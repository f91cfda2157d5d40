"""Readers of the small files a recipe names besides the model file: GeoJSON regions.

The parsing and checking of the geometry is science (:func:`initgen.science.regions.shapes.geojson_region`);
this module only opens and decodes the file.
"""

from __future__ import annotations

import json
import os

from initgen.errors import InputError
from initgen.science.regions.shapes import geojson_region

__all__ = ["read_geojson"]


def read_geojson(path):
    """Read a region from a GeoJSON file (RFC 7946: WGS84 longitude, latitude).

    Parameters
    ----------
    path : str or os.PathLike
        A FeatureCollection, Feature or bare geometry of Polygons or MultiPolygons.

    Returns
    -------
    shapely.Polygon or shapely.MultiPolygon

    Raises
    ------
    InputError
        Missing or unreadable file, invalid JSON, or what :func:`geojson_region` refuses.

    References
    ----------
    Butler, H., et al. (2016). The GeoJSON Format. IETF RFC 7946.
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8") as fh:
            doc = json.load(fh)
    except FileNotFoundError:
        raise InputError(f"GeoJSON file '{name}' not found; check the path")
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(f"GeoJSON file '{name}' cannot be read ({err})")
    except json.JSONDecodeError as err:
        raise InputError(f"GeoJSON file '{name}' is not valid JSON (line {err.lineno}: "
                         f"{err.msg})")
    return geojson_region(doc, name)
