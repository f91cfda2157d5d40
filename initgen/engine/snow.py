"""Snow in one block: the active snow layers, melt of warmed snow, and the snow mass written back.
"""

from __future__ import annotations

import numpy as np

from initgen.engine.tiling import _bcast_h
from initgen.errors import InputError
from initgen.science import constants, sources
from initgen.science.constants import T_FREEZE


def _active_snow_layers(plan, store, hkey, shape, snow_mass, led):
    """Snow layers holding snow, (E, Ls, *h) bool, and each layer's snow mass (kg m-2) where the
    file gives it. From the file's layer masses (> 0), or its snow-layer count (the layout says
    whether the first or the last layers are the active ones), or, with neither, every layer of
    a cell whose snow mass is > 0 (said in the ledger)."""
    model = plan.model
    nl = shape[1]
    lm_role = model.role("snow_layer_mass")
    if lm_role is not None:
        lm = lm_role.read(store, hkey)
        lm = lm if lm_role.layered else lm[:, None]
        if lm.shape != shape:
            raise InputError(f"{store.describe()}: variable '{lm_role.variables[0]}' (snow_layer_mass) has "
                             f"{lm.shape[1]} layer(s) but the snow temperature has {nl}; name matching variables "
                             "in the layout")
        led.note("snow_layers_active", f"where the layer mass in '{lm_role.variables[0]}' is > 0")
        return np.isfinite(lm) & (lm > 0), np.where(np.isfinite(lm), lm, 0.0)
    snow_now = snow_mass
    if snow_now is None and model.role("snow_mass") is not None:
        snow_now = model.role("snow_mass").read(store, hkey)
    has_snow = None if snow_now is None else np.broadcast_to((np.isfinite(snow_now) & (snow_now > 0))[:, None], shape)
    cnt_role = model.role("snow_layer_count")
    if cnt_role is not None:
        which = model.layout.view.snow_layer_count_active if model.layout is not None else None
        if which not in ("first", "last"):
            raise InputError(f"layout: roles.snow_layer_count names '{cnt_role.variables[0]}' but the layout does not "
                             "say which snow layers it counts; set snow_layer_count_active: first or last (along "
                             "the snow layer axis as stored)")
        n = cnt_role.read(store, hkey)
        n = np.where(np.isfinite(n), n, 0.0)[:, None]
        idx = np.arange(nl).reshape((1, nl) + (1,) * (len(shape) - 2))
        active = (idx < n) if which == "first" else (idx >= nl - n)
        led.note("snow_layers_active", f"the {which} n layers, n from '{cnt_role.variables[0]}'")
        active = active if has_snow is None else active & has_snow
        return active, _split_snow_mass(snow_now, active, led)
    if has_snow is None:
        led.note("snow_layers_active", "every layer (the file gives no snow mass, layer count or layer mass)")
        return None, None
    led.note("snow_layers_active", "every layer of a cell whose snow mass is > 0 (the file gives no snow layer "
                                   "count or layer mass)")
    return has_snow, _split_snow_mass(snow_now, has_snow, led)


def _split_snow_mass(snow_now, active, led):
    """Layer masses when the file has only the total: split equally between a cell's active
    layers. A guess, and said so in the ledger; it matters only where snow melts (energy mode)."""
    if snow_now is None:
        return None
    n = np.maximum(active.sum(axis=1, keepdims=True), 1)
    led.note("snow_layer_mass", "not in the file: where snow melts, each active layer is taken to hold an equal "
                                "share of the snow mass (a guess; name roles.snow_layer_mass for the model's own)")
    return np.where(active, np.where(np.isfinite(snow_now), snow_now, 0.0)[:, None] / n, 0.0)


def _melt_snow(T, moved, layer_mass, led, area):
    """Energy mode: snow warmed past 273.15 K melts instead of warming further.

    The energy above 0 C, m c_i (T - T_f) per layer (m the layer's snow mass, c_i the specific
    heat of ice), melts m c_i (T - T_f) / L_f kg m-2 of snow (at most the layer's mass) and the
    layer stays at T_f. Without layer masses in the file the change is refused: the energy cannot
    be accounted for.
    """
    over = moved & (T > T_FREEZE)
    if layer_mass is None:
        raise InputError("physics mode energy melts snow warmed past 273.15 K, which needs each snow layer's mass; "
                         "name roles.snow_layer_mass in the layout, or use physics mode temperature (which caps snow "
                         "at 273.15 K and counts the clamp)")
    excess = np.where(over, T - T_FREEZE, 0.0)
    melt = np.minimum(layer_mass, layer_mass * constants.CP_ICE * excess / constants.LATENT_HEAT_FUSION)
    melt = np.where(over, melt, 0.0)
    a = _bcast_h(area, 2)
    led.add_phase("snow_melted_kg", (melt * a).sum(axis=tuple(i for i in range(melt.ndim) if i != 1)))
    led.note("snow_melt_water", "snow that melted leaves the column: initgen writes it into no liquid water "
                                "variable (the snow mass goes down by the melt, counted in snow_melted_*)")
    led.flag("snow_layers_melting", np.count_nonzero(melt > 0))
    return np.where(over, T_FREEZE, T), melt


FRESH_SNOW_DENSITY = 100.0  # kg m-3, used only when snow appears where there was none (common practice)


def _snow_mass_change(plan, store, hkey, weights, inside_h, led):
    """The recipe's snow_mass change: (mass before, after, cells inside the region)."""
    model = plan.model
    role = model.role("snow_mass")
    m0 = role.read(store, hkey)
    inside = np.broadcast_to(inside_h[None], m0.shape) & np.isfinite(m0)
    m = m0.copy()
    for b, w in zip(plan.blocks, weights):
        if "snow_mass" not in b.targets:
            continue
        ww = w[None]
        if b.donor is not None:
            D = b.donor.require("snow_mass", "the donor must hold the targets").read(b.donor.store, hkey)
            m = np.where(inside, sources.donor_blend(m, D, np.broadcast_to(ww, m.shape)), m)
        elif b.snow_mass_mode == "add":
            m = np.where(inside, m + ww * b.snow_mass_change * plan.member_scale, m)
        else:
            m = np.where(inside, m * (1.0 + ww * b.snow_mass_change * plan.member_scale), m)
    neg = inside & (m < 0)
    led.clamp("snow_mass_negative", np.count_nonzero(neg))
    return m0, np.where(neg, 0.0, m), inside


def _snow_layer_mass_write(plan, store, hkey, melt, led, area, write):
    """Take melted snow off the file's snow layer masses (values as stored)."""
    role = plan.model.role("snow_layer_mass")
    if role is None:
        return
    lm0 = role.read(store, hkey)
    lm0 = lm0 if role.layered else lm0[:, None]
    moved = melt > 0
    lm = np.where(moved, role.stored(np.maximum(lm0 - melt, 0.0)), lm0)
    changed = moved & (lm != lm0)
    led.stats(role.variables[0], "snow_layer_mass", role.units or "kg m-2", lm.shape[1], role.layered).add(
        lm - lm0, np.isfinite(lm0) & (lm0 > 0), area)
    if write:
        role.write(store, hkey, lm if role.layered else lm[:, 0], changed if role.layered else changed[:, 0])


def _snow_mass_write(plan, store, hkey, m0, m, inside, led, area, write):
    """Write the new snow mass (values as stored) and scale the snow depth with it."""
    model = plan.model
    role = model.role("snow_mass")
    m = np.where(inside, role.stored(m), m)
    changed = inside & (m != m0)
    led.stats(role.variables[0], "snow_mass", role.units or "kg m-2", 1, False).add(m - m0, inside, area)
    if write:
        role.write(store, hkey, m, changed)
    depth_role = model.role("snow_depth")
    if depth_role is not None:
        d0 = depth_role.read(store, hkey)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(m0 > 0, m / m0, np.nan)
        d = np.where(changed & (m0 > 0), d0 * ratio, d0)
        d = np.where(changed & ~(m0 > 0), m / FRESH_SNOW_DENSITY, d)
        d = np.where(changed & np.isfinite(d0), depth_role.stored(d), d0)
        dchanged = changed & np.isfinite(d0) & (d != d0)
        led.stats(depth_role.variables[0], "snow_depth", depth_role.units or "m", 1, False).add(d - d0, inside, area)
        if write:
            depth_role.write(store, hkey, d, dchanged)


# ---------------------------------------------------------------------------------------------
