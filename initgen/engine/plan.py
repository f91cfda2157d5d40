"""Turn a recipe and a model file into a plan, and apply it block by block.

For each perturbation block of the recipe the plan holds the horizontal weight ``w(x)``, the
surface anomaly ``A(x)`` (or a donor store), and the vertical factor ``f(z)`` per soil layer. The
target change is ``dT(z, x) = w(x) * f(z) * A(x)``. Blocks are applied in recipe order, each to the
result of the previous one (documented in the README), so a recipe with two blocks equals two
runs with one block each.

The arrays come from :mod:`initgen.engine.fields`; the slabs and blocks from
:mod:`initgen.engine.tiling`; snow from :mod:`initgen.engine.snow`; soil water and the phase step
from :mod:`initgen.engine.physics`. Every block goes through the same code whether the store is a
netCDF file being patched in place or an in-memory xarray dataset.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np

from initgen.config.recipe import Document
from initgen.engine import ledger as ledger_mod
from initgen.engine import persistence
from initgen.engine.fields import (BlockPlan, Plan, _keyed, block_anomaly, find_window, horizontal_weight,
                                   profile_factors, referenced_files, region_geometry)
from initgen.engine.physics import (_equilibrate_blend, _flag_departures, _hydraulics, _physics, _read_water,
                                    _report_input_shift, _temp_read, _temp_stored, _temp_write, _write_water,
                                    soil_parameter_sources)
from initgen.engine.snow import (_active_snow_layers, _melt_snow, _snow_layer_mass_write, _snow_mass_change,
                                 _snow_mass_write)
from initgen.engine.tiling import _bcast_h, _layer_col, blocks_of, slabs
from initgen.errors import InputError, InputWarning
from initgen.io.atomic import sha256_file
from initgen.io.model import ModelFile
from initgen.science import sources
from initgen.science.constants import T_FREEZE
from initgen.science.soil import conversion as soil_conversion
from initgen.science.soil import limits as soil_limits
from initgen.science.soil import properties as soil_properties


def needed_roles(recipe: Document) -> tuple:
    view = recipe.view
    need = set(view.targets)
    if view.physics.active and "soil_temperature" in need:
        need.update(("soil_liquid", "soil_ice"))
    return tuple(sorted(need))


# ---------------------------------------------------------------------------------------------


def build_plan(recipe: Document, model: ModelFile, *, allow_outside: bool = False) -> Plan:
    blocks = []
    view = recipe.view
    geoms = [region_geometry(b.region, recipe, f"perturbations[{i}].region", allow_outside)
             for i, b in enumerate(view.perturbations)]
    window = find_window(model, [(g, b.region.taper_km) for g, b in zip(geoms, view.perturbations)])
    if any(w.size == 0 for w in window):
        name = view.perturbations[0].name
        raise InputError(f"region '{name}' contains no grid point; the grid spans {model.grid.extent()}; check the "
                         "region's coordinates and longitude convention")
    lon, lat, _ = model.grid.at(window)
    region_any = np.zeros(lon.shape, bool)
    for i, (b, geom) in enumerate(zip(view.perturbations, geoms)):
        key = f"perturbations[{i}]"
        w = horizontal_weight(model, b.region, geom, b.name, window, lon, lat, key=f"{key}.region")
        anomaly, donor = block_anomaly(model, b.anomaly, recipe, f"{key}.anomaly", w, allow_outside, (lon, lat))
        factors, fsurf = profile_factors(b.profile, model.layers, f"{key}.profile")
        soil = model.role("soil_temperature")
        if factors is not None and soil is not None and soil.layered and soil.nlayers != factors.size:
            raise InputError(f"{model.store.describe()}: soil temperature has {soil.nlayers} layers but the layer "
                             f"depths describe {factors.size}; check the layout's depth role and snow_layers")
        if factors is None and soil is not None and soil.layered:
            factors = np.ones(soil.nlayers)
        blocks.append(BlockPlan(b.name, i, b.targets, w, anomaly, factors, fsurf, donor,
                                b.snow_mass_mode, b.snow_mass_change, [str(geom.bounds)]))
        region_any |= w > 0
    plan = Plan(recipe, model, blocks, view.physics, region_any, window)
    plan.files = referenced_files(recipe, allow_outside)
    if getattr(model, "grid_file", None):  # the layout's separate grid file: its hash goes into the provenance

        plan.files["layout.grid_file"] = {"path": model.grid_file, "sha256": sha256_file(model.grid_file)}
    check_before_writing(plan)
    return plan


def check_before_writing(plan: Plan) -> None:
    """Refuse units and soil textures initgen cannot use, before anything is read block by block or written."""
    model = plan.model
    try:
        _check_units(plan, model)
    except InputError as exc:
        raise InputError(f"{model.store.describe()}: {exc}") from None
    if plan.physics.texture:
        try:
            soil_properties.hydraulics_from_texture(plan.physics.texture)
        except InputError as exc:
            raise _keyed(exc, "physics.texture") from None
    # the soil parameters the physics will use, read and range-checked where the region lies,
    # so that `check` and `apply` refuse them before anything is written
    soil_role = model.role("soil_temperature")
    if plan.physics.active and "soil_temperature" in plan.targets and soil_role is not None \
            and model.layers is not None:
        for slab in slabs(plan):
            for hkey, _ in blocks_of(plan, slab):
                shape = soil_role.read(model.store, hkey).shape
                shape = shape if soil_role.layered else (shape[0], 1) + shape[1:]
                _hydraulics(plan, model.store, hkey, shape)


def _temperatures_without_units(plan: Plan, model: ModelFile) -> list:
    """(target, role) of every temperature the plan changes whose variable has no units (taken as K)."""
    return [(t, model.role(t)) for t in ("soil_temperature", "skin_temperature", "snow_temperature")
            if t in plan.targets and model.role(t) is not None and not model.role(t).units]


def _check_units(plan: Plan, model: ModelFile) -> None:
    for target, role in _temperatures_without_units(plan, model):
        warnings.warn(f"{model.store.describe()}: variable '{role.variables[0]}' ({target}) has no units "
                      f"attribute; assuming K (give it units, or set layout key units.{target})", InputWarning, stacklevel=2)
    for target in ("soil_temperature", "skin_temperature", "snow_temperature"):
        role = model.role(target)
        if target in plan.targets and role is not None:
            soil_conversion.temperature_to_kelvin(np.zeros(1), role.units or "K", name=role.variables[0], key=f"units.{target}")
    if plan.physics.active and "soil_temperature" in plan.targets:
        for rname in ("soil_liquid", "soil_ice"):
            role = model.role(rname)
            if role is not None:
                soil_conversion.water_to_volumetric(np.zeros(1), role.units or "kg m-2", np.ones(1), porosity=np.ones(1),
                                         name=role.variables[0])


def run(plan: Plan, store, *, write: bool, progress=None) -> dict:
    """Apply the plan to ``store`` (writing only when ``write``) and return the ledger
    (``LedgerView.to_dict()``: the dict a provenance record stores)."""
    led = ledger_mod.Ledger(plan)
    for target, role in _temperatures_without_units(plan, plan.model):  # a guess: the ledger says so too
        led.note(f"units.{target}", f"variable '{role.variables[0]}' has no units attribute; its values were taken "
                                    f"as K (a guess: give it units, or set layout key units.{target})")
    if plan.physics.active:
        led.soil_sources = soil_parameter_sources(plan.physics, plan.model)
    all_blocks = [b for s in slabs(plan) for b in blocks_of(plan, s)]
    limits = plan.model.limits
    limits.reset(clip=plan.recipe.view.limits.packed_out_of_range == "clip")
    for k, (hkey, widx) in enumerate(all_blocks):
        apply_block(plan, store, hkey, widx, led, write=write)
        if progress:
            progress(k + 1, len(all_blocks))
    if plan.blocks and any(b.donor for b in plan.blocks):
        for b in plan.blocks:
            if b.donor:
                b.donor.store.close()
    _storable_or_refuse(plan, led)
    view = led.finish()
    if plan.model.water is not None and plan.physics.active and "soil_temperature" in plan.targets:
        view = replace(view, water=plan.model.water.record())
    view = replace(view, data_blocks_read=len(all_blocks))
    odd = sum(view.flags.get(k, 0) for k in ("realised_change_opposite_to_imposed",
                                              "realised_change_larger_than_imposed",
                                              "phase_change_against_imposed_change"))
    source = plan.physics.texture or ("sand/clay" if plan.physics.sand_pct is not None else "the given parameters")
    shift = view.input_phase_disequilibrium
    # the change-driven rule holds ice beside liquid below the curve as stable: warn only about
    # states it would not hold either; the equilibrium rule re-balances every cell counted
    warn_cells = (shift.cells if shift and shift.acted_on else
                  sum(shift.inconsistent_per_layer) if shift else 0)
    if warn_cells:
        fr = sum(shift.would_freeze_kg_per_layer)
        me = sum(shift.would_melt_kg_per_layer)
        warnings.warn(f"{warn_cells} region layer-cell(s) of the input are not in phase equilibrium "
                      f"for the soil parameters used ({source}): the equilibrium rule would freeze {fr:.3g} kg and "
                      f"melt {me:.3g} kg of water there; "
                      + ("physics.phase_rule equilibrium re-balances them" if shift.acted_on else
                         "the change-driven rule leaves them as they are")
                      + "; check that physics matches your model (or give its parameters in the layout)",
                      InputWarning, stacklevel=2)
    if odd:
        warnings.warn(f"{odd} soil layer-cell flag(s) where water froze while warming, ice melted while cooling, or "
                      "the temperature moved against or beyond the imposed change: the start is "
                      f"not in phase equilibrium for the soil parameters used ({source}), so water froze or melted on "
                      "its own; check that physics matches your model (or give its parameters in the layout)",
                      InputWarning, stacklevel=2)
    return view.to_dict()


def _storable_or_refuse(plan: Plan, led) -> None:
    """Values a variable cannot hold (grid.StoreLimits, noted by Role.stored): refused, naming the
    variable, its storable range and the cell count; or, when the recipe allows clipping, counted
    as clamps by rule. Preview and apply run the same code, so they refuse and count alike."""
    limits = plan.model.limits
    if limits.clip:
        for name, n in sorted(limits.counts.items()):
            led.clamp(f"{name}_outside_packed_range", n)
        return
    if limits.counts:
        parts = []
        for name, n in sorted(limits.counts.items()):
            lo, hi, units, how = limits.ranges[name]
            parts.append(f"variable '{name}' ({how}) holds only {lo:.6g}..{hi:.6g} {units}".rstrip()
                         + f" and the change puts {n} cell(s) outside that range")
        raise InputError(f"{plan.model.store.describe()}: " + "; ".join(parts) + "; nothing was written: repack the "
                         "variable with a wider range, or set recipe key limits.packed_out_of_range: clip to clip "
                         "(the ledger then counts the clipped cells as clamps)")


T_PLAUSIBLE_K = (100.0, 400.0)  # the widest clamps the recipe schema allows


def _check_no_undeclared_gaps(role, values, inside, store):
    """NaN inside the region in a variable that declares no fill value is an error, not ocean;
    so is a "temperature" no soil or snow can have (an undeclared fill value such as 1e20 or the
    netCDF default 9.97e36), which the clamps would otherwise turn into a plausible number."""
    lo, hi = T_PLAUSIBLE_K
    odd = inside & np.isfinite(values) & ((values < lo) | (values > hi))
    if np.any(odd):
        v = float(values[odd].flat[0])
        hint = ("declare it as _FillValue or fix the file" if role.units else
                f"it has no units attribute and was read as K: if it holds degrees Celsius, give it units "
                f"degC or set layout key units.{role.name}: degC; if these are fill values, declare _FillValue")
        raise InputError(f"{store.describe()}: variable '{role.variables[0]}' holds {v:.6g} K inside the region "
                         f"({int(odd.sum())} value(s) outside {lo:g}..{hi:g} K), not a temperature; {hint}")
    if not np.any(inside & ~np.isfinite(values)):
        return
    attrs = role.views[0].info.attrs
    if not any(k in attrs for k in ("_FillValue", "missing_value", "valid_range", "valid_min", "valid_max")):
        raise InputError(f"{store.describe()}: variable '{role.variables[0]}' has NaN values inside the region but "
                         "declares no _FillValue; fix the file or mark the missing cells with a fill value")


def apply_block(plan: Plan, store, hkey: dict, widx: tuple, led, *, write: bool) -> None:
    """Apply the plan to one block: ``hkey`` the file slices, ``widx`` the same cells in the window."""
    model = plan.model
    hidx = widx
    nh = len(model.grid.shape)
    area = plan.area[hidx]
    weights = [b.weight[hidx] for b in plan.blocks]
    inside_h = np.any([w > 0 for w in weights], axis=0)
    if not np.any(inside_h):
        return
    targets = plan.targets
    phys = plan.physics
    top_change = None  # realised change of the top soil layer, set when a physics mode runs

    # --- soil temperature (with water and ice when physics is on) ---------------------------
    if "soil_temperature" in targets:
        role = model.role("soil_temperature")
        T0 = _temp_read(role, store, hkey)
        layered = role.layered
        if not layered:
            T0 = T0[:, None]
        inside = np.broadcast_to(_bcast_h(inside_h, 2), T0.shape) & np.isfinite(T0)
        _check_no_undeclared_gaps(role, T0, np.broadcast_to(_bcast_h(inside_h, 2), T0.shape), store)
        T = T0.copy()
        water = _read_water(plan, store, hkey, T0.shape) if phys.active else None
        if water is not None:
            _report_input_shift(T0, water, inside, led, area)
        for b, w in zip(plan.blocks, weights):
            if "soil_temperature" not in b.targets:
                continue
            f = b.factors if b.factors is not None else np.ones(T.shape[1])
            wf = _bcast_h(w, 2) * _layer_col(f, nh)
            sel = (wf != 0) & np.isfinite(T)
            if b.donor is not None:
                donor_role = b.donor.require("soil_temperature", "the donor must hold the targets")
                D = _temp_read(donor_role, b.donor.store, hkey)
                D = D if layered else D[:, None]
                T = np.where(sel, sources.donor_blend(T, D, np.broadcast_to(wf, T.shape)), T)
                if water is not None:
                    dw = _read_water(plan, store, hkey, T.shape, donor=b.donor)
                    for k in ("liq", "ice"):
                        water[k] = np.where(sel, sources.donor_blend(water[k], dw[k], np.broadcast_to(wf, T.shape)),
                                            water[k])
                if water is not None:
                    _equilibrate_blend(T, water, sel, led, area, phys.phase_rule)
                continue
            dT = wf * _bcast_h(plan.effective_anomaly(b, hidx), 2)
            if water is None:
                T = np.where(sel, T + dT, T)
            else:
                T_before = T
                T = _physics(T, T + dT, water, sel, phys, led, area, nh, mode=phys.mode, dT=dT)
                _flag_departures(led, T - T_before, np.where(sel, dT, 0.0), sel)
        T[inside], n_low, n_high = soil_limits.clamp_soil_temperature(
            T[inside], phys.soil_temperature_min_K, phys.soil_temperature_max_K)
        led.clamp("soil_temperature_below_min", n_low)
        led.clamp("soil_temperature_above_max", n_high)
        T = np.where(inside, _temp_stored(role, T, layered), T)
        changed = inside & (T != T0)
        led.stats(role.variables[0] if len(role.variables) == 1 else "+".join(role.variables), "soil_temperature",
                  "K", T.shape[1], layered).add(T - T0, inside, area)
        _temp_write(role, store, hkey, T if layered else T[:, 0], changed if layered else changed[:, 0], write)
        if water is not None:
            _write_water(plan, store, hkey, water, inside, led, area, write)
            # with a physics mode the skin follows the top layer's realised change (latent heat included)
            top_change = np.where(np.isfinite(T[:, 0]) & np.isfinite(T0[:, 0]), T[:, 0] - T0[:, 0], 0.0)
        # how long the change lasts under pure conduction (persistence.py; reads T0, T and water only)
        persistence.add_block(plan, led, T0, T, water, inside, area, store, hkey)

    # --- skin temperature, snow temperature, snow mass ---------------------------------------
    snow_mass_now = None
    snow = None   # (m0, m, inside): snow mass before and after the recipe's snow_mass change
    if "snow_mass" in targets:
        snow = _snow_mass_change(plan, store, hkey, weights, inside_h, led)
        snow_mass_now = snow[1]
    if "skin_temperature" in targets:
        _surface_temperature(plan, store, hkey, widx, "skin_temperature", weights, inside_h, led, area, write,
                             snow_mass=snow_mass_now, follow=top_change)
    melt = None
    if "snow_temperature" in targets:
        melt = _surface_temperature(plan, store, hkey, widx, "snow_temperature", weights, inside_h, led, area,
                                    write, snow_mass=snow_mass_now)
    if melt is not None and snow is None:
        m0 = model.role("snow_mass").read(store, hkey)
        snow = (m0, m0.copy(), np.broadcast_to(inside_h[None], m0.shape) & np.isfinite(m0))
    if snow is not None:
        m0, m, inside_s = snow
        if melt is not None:
            m = np.where(inside_s, np.maximum(m - melt.sum(axis=1), 0.0), m)
            _snow_layer_mass_write(plan, store, hkey, melt, led, area, write)
        _snow_mass_write(plan, store, hkey, m0, m, inside_s, led, area, write)


def _surface_temperature(plan, store, hkey, widx, target, weights, inside_h, led, area, write, snow_mass=None,
                         follow=None):
    """Skin or snow temperature: moves with the surface factor, or (skin, physics modes) follows the
    realised change of the top soil layer (``follow``); under snow the skin stays at or below 0 C."""
    model = plan.model
    role = model.role(target)
    T0 = _temp_read(role, store, hkey)
    layered = role.layered
    T0 = T0 if layered else T0[:, None]
    inside = np.broadcast_to(_bcast_h(inside_h, 2), T0.shape) & np.isfinite(T0)
    _check_no_undeclared_gaps(role, T0, np.broadcast_to(_bcast_h(inside_h, 2), T0.shape), store)
    layer_mass = None
    if target == "snow_temperature":
        # only snow layers that hold snow change: the others' temperatures are placeholders
        active, layer_mass = _active_snow_layers(plan, store, hkey, T0.shape, snow_mass, led)
        if active is not None:
            inside = inside & active
    T = T0.copy()
    mine = [b for b in plan.blocks if target in b.targets]
    if follow is not None and follow.shape[0] == T.shape[0] and all(
            "soil_temperature" in b.targets and b.donor is None for b in mine):
        sel = np.any([_bcast_h(w, 2) != 0 for b, w in zip(plan.blocks, weights) if b in mine], axis=0)
        T = np.where(sel & inside, T0 + follow[:, None], T)
        mine = []
    for b, w in zip(plan.blocks, weights):
        if b not in mine:
            continue
        ww = _bcast_h(w, 2)
        sel = (ww != 0) & inside
        if b.donor is not None:
            D = _temp_read(b.donor.require(target, "the donor must hold the targets"), b.donor.store, hkey)
            D = D if layered else D[:, None]
            T = np.where(sel, sources.donor_blend(T, D, np.broadcast_to(ww, T.shape)), T)
        else:
            T = np.where(sel, T + ww * b.surface_factor * _bcast_h(plan.effective_anomaly(b, widx), 2), T)
    melt = None
    if target == "snow_temperature":
        moved = inside & (T != T0)          # snow the recipe changed; other values stay as read
        if plan.physics.mode == "energy" and np.any(moved & (T > T_FREEZE)):
            T, melt = _melt_snow(T, moved, layer_mass, led, area)
        T[moved], n = soil_limits.clamp_snow_temperature(T[moved])
        led.clamp("snow_temperature_above_freezing", n)
    else:
        snow = snow_mass
        if snow is None and model.role("snow_mass") is not None:
            snow = model.role("snow_mass").read(store, hkey)
        if snow is not None:
            covered = np.broadcast_to((snow > 0)[:, None], T.shape)
            over = inside & covered & (T > T_FREEZE) & (T != T0)
            # the snow-covered part of the cell stays at or below 0 C; with a snow cover fraction f
            # from the file only that part is capped: T <= f T_f + (1 - f) T
            frac_role = model.role("snow_cover_fraction")
            f = 1.0
            if frac_role is not None:
                f = frac_role.read(store, hkey)
                f = np.clip(np.where(np.isfinite(f), f / (100.0 if frac_role.units.strip() in ("%", "percent")
                                                            else 1.0), 1.0), 0.0, 1.0)[:, None]
            cap = f * T_FREEZE + (1.0 - f) * T
            capped = np.maximum(cap, np.minimum(T0, T))
            over = over & (capped != T)
            led.clamp("skin_temperature_above_freezing_under_snow", np.count_nonzero(over))
            T = np.where(over, capped, T)
    T = np.where(inside, _temp_stored(role, T, layered), T)
    changed = inside & (T != T0)
    led.stats(role.variables[0], target, "K", T.shape[1], layered).add(T - T0, inside, area)
    _temp_write(role, store, hkey, T if layered else T[:, 0], changed if layered else changed[:, 0], write)
    return melt
