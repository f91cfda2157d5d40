"""CF detection: the roles' CF standard names (a table, as data) and the reading of CF attributes
(``standard_name``, ``units``, ``axis``, ``positive``, bounds) that finds a role's variable and
its layer depths when no layout names them.
"""

from __future__ import annotations

import numpy as np

from initgen.errors import InputError
from initgen.io.model import LAYERED_ROLES
from initgen.io.stores import Store, VarInfo
from initgen.science import layers as layers_mod
from initgen.science import units as units_mod

CF_ROLES = {
    "soil_temperature": ("soil_temperature",),
    "soil_liquid": ("liquid_water_content_of_soil_layer", "mass_content_of_liquid_water_in_soil_layer",
                    "volume_fraction_of_liquid_water_in_soil"),
    "soil_ice": ("frozen_water_content_of_soil_layer", "mass_content_of_frozen_water_in_soil_layer",
                 "volume_fraction_of_frozen_water_in_soil"),
    "land_fraction": ("land_area_fraction",),
    "land_mask": ("land_binary_mask",),
    "surface_altitude": ("surface_altitude",),
    "skin_temperature": ("surface_temperature",),
    "snow_temperature": ("temperature_in_surface_snow",),
    "snow_mass": ("surface_snow_amount",),
    "snow_depth": ("surface_snow_thickness",),
    "snow_cover_fraction": ("surface_snow_area_fraction",),
    "cell_area": ("cell_area",),
    # soil water kept as a total (water in all phases) with a phase fraction; names checked against
    # the CF standard name table as the CMIP7 data request copies it (2025) and the CF editor's
    # version-68 update; the table has no frozen mass fraction of soil moisture (layout only)
    "soil_water_total": ("mass_content_of_water_in_soil_layer",),
    "soil_unfrozen_fraction": ("mass_fraction_of_unfrozen_water_in_soil_moisture",),
    "soil_frozen_fraction": (),
}


def is_length(units) -> bool:
    """Whether ``units`` is a length (any UDUNITS length: a depth coordinate's units), by the one
    unit parser, :func:`initgen.science.units.metres_per`."""
    return units_mod.metres_per(units) is not None


def _cf_candidates(store: Store, role: str) -> list:
    """Every variable whose standard_name is one of the role's CF names, in file order."""
    names = CF_ROLES.get(role, ())
    return [v for v, info in store.variables.items() if str(info.attrs.get("standard_name", "")).strip() in names]


def _find_cf(store: Store, role: str) -> str | None:
    hits = _cf_candidates(store, role)
    return hits[0] if hits else None


def _record_dims(store: Store) -> set:
    """Dimensions that count records (time), not layers: a CF time coordinate or a usual name."""
    out = set()
    for d in store.dims:
        info = store.variables.get(d)
        if d.lower() in ("time", "t", "record", "records", "rec", "nrec"):
            out.add(d)
        elif info is not None and (str(info.attrs.get("standard_name", "")) == "time"
                                   or str(info.attrs.get("axis", "")).upper() == "T"
                                   or " since " in info.units.lower()):
            out.add(d)
    return out


def _scalar_depth(store: Store, info: VarInfo):
    """(node, (top, bottom), label) in metres from a CF scalar depth coordinate named in the
    variable's ``coordinates`` attribute, or a depth axis of length 1 (its ``bounds`` give the top
    and bottom), or None."""
    names = str(info.attrs.get("coordinates", "")).split()
    names += [d for d, n in zip(info.dims, info.shape) if n == 1 and d not in names]  # size-1 depth axes
    for cname in names:
        c = store.variables.get(cname)
        if c is None or int(np.prod(c.shape)) != 1:
            continue
        if not is_length(c.units) and str(c.attrs.get("standard_name", "")) != "depth":
            continue
        units = c.units or "m"
        if not is_length(c.units):
            raise InputError(f"{store.describe()}: depth coordinate '{cname}' of '{info.name}' has units "
                             f"'{c.units}'; give it a length unit (m, cm or mm)")
        pos = c.attrs.get("positive", "down")
        node = float(layers_mod._to_depth_m(np.ravel(store.read(cname)), units, pos, f"{store.describe()}: {cname}")[0])
        tb = None
        bname = c.attrs.get("bounds")
        if bname and bname in store.variables:
            bv = np.sort(np.abs(layers_mod._to_depth_m(np.ravel(store.read(bname)), units, pos,
                                                       f"{store.describe()}: {bname}")))
            if bv.size != 2:
                raise InputError(f"{store.describe()}: bounds '{bname}' of depth coordinate '{cname}' has {bv.size} "
                                 "values; CF bounds of a scalar coordinate hold 2 (top and bottom)")
            tb = (float(bv[0]), float(bv[1]), f"CF bounds '{bname}' of the scalar depth coordinate of {info.name}")
        return node, tb, f"CF scalar depth coordinate '{cname}' of {info.name}"
    return None


_TOP_BOTTOM_ATTRS = (("layer_top", "layer_bottom"), ("depth_top", "depth_bottom"), ("top_depth", "bottom_depth"))


def _attr_range(store: Store, info: VarInfo):
    """(top, bottom, label) in metres from a variable's layer top/bottom attributes, or None."""
    for ka, kb in _TOP_BOTTOM_ATTRS:
        if ka in info.attrs and kb in info.attrs:
            units = info.attrs.get("depth_units") or info.attrs.get("layer_units")
            if not units:
                raise InputError(f"{store.describe()}: variable '{info.name}' has attributes {ka}/{kb} but no "
                                 "depth_units attribute; add depth_units (m, cm or mm) to the file or give the "
                                 "depths with roles.layer_interface_depth in a layout")
            vals = layers_mod._to_depth_m([float(np.ravel(info.attrs[ka])[0]), float(np.ravel(info.attrs[kb])[0])],
                                          str(units), "down", f"{store.describe()}: {info.name}.{ka}/{kb}")
            return float(vals[0]), float(vals[1]), f"attributes {ka}/{kb} of {info.name}"
    return None


def _per_layer_depths(store: Store, infos: list) -> list:
    """Depth candidates (for layers.resolve_layers) of a set of per-layer 2-D variables, one per
    layer, top first. A kind of source counts only when every layer has it."""
    out = []
    scal = [_scalar_depth(store, i) for i in infos]
    if all(x is not None for x in scal):
        out.append(("node", [x[0] for x in scal], [x[2] for x in scal]))
        if all(x[1] is not None for x in scal):
            out.append(("top_bottom", [x[1][:2] for x in scal], [x[1][2] for x in scal]))
    att = [_attr_range(store, i) for i in infos]
    if all(x is not None for x in att):
        out.append(("top_bottom", [x[:2] for x in att], [x[2] for x in att]))
    for what in ("name", "long_name"):
        texts = [i.name if what == "name" else i.attrs.get("long_name") for i in infos]
        rng = [layers_mod.depth_range_in_text(t) for t in texts]
        if all(r is not None for r in rng):
            out.append(("top_bottom", rng, [f"the depth range in the {what} of {i.name} ('{t}')"
                                            for i, t in zip(infos, texts)]))
    return out


def _depth_key(store: Store, info: VarInfo):
    """A depth by which to order a per-layer 2-D variable among its role's candidates, or None."""
    for cands in _per_layer_depths(store, [info]):
        v = np.ravel(np.asarray(cands[1], float))
        return float(v[0])
    return None


def _cf_role(store: Store, role: str, hdims: tuple, records: set):
    """The CF candidates of a role: (spec, how) where spec is a name or a per-layer list, or None.

    Several 2-D candidates of a layered role are one per-layer set when each has a depth (scalar
    depth coordinate, top/bottom attributes, a range in its name or long_name); they are ordered
    by depth. Any other case of two or more candidates is refused, naming them.
    """
    hits = _cf_candidates(store, role)
    if not hits:
        return None
    how = "CF standard_name " + ", ".join(sorted({str(store.variables[h].attrs["standard_name"]) for h in hits}))
    if len(hits) == 1:
        info = store.variables[hits[0]]
        flat = not [d for d in info.dims if d not in hdims and d not in records and store.dims[d] > 1]
        if role in LAYERED_ROLES and flat and _depth_key(store, info) is not None:
            return [hits[0]], how + " (one per-layer variable with its depth)"
        return hits[0], how
    if role in LAYERED_ROLES:
        flat = [h for h in hits if not [d for d in store.variables[h].dims
                                        if d not in hdims and d not in records and store.dims[d] > 1]]
        keys = {h: _depth_key(store, store.variables[h]) for h in flat}
        if len(flat) == len(hits) and all(k is not None for k in keys.values()):
            ordered = sorted(hits, key=lambda h: keys[h])
            return ordered, how + f" ({len(hits)} per-layer variables, ordered by depth)"
    raise InputError(f"{store.describe()}: two candidates for role {role}: '{hits[0]}' and '{hits[1]}'"
                     + (f" (and {len(hits) - 2} more)" if len(hits) > 2 else "")
                     + f" ({how}); name the one to use under roles.{role} in a layout")
