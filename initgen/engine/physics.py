"""Soil water and ice for the physics modes, in one block: hydraulic parameters from the file or the
recipe, the water convention read and written back, the phase step and its checks and flags.
"""

from __future__ import annotations

import numpy as np

from initgen.config.views import Physics
from initgen.engine.fields import Plan
from initgen.engine.tiling import _bcast_h, _layer_col
from initgen.errors import InputError
from initgen.io import water as water_mod
from initgen.io.model import ModelFile
from initgen.io.water import FRACTION_ROLES, fraction_factor
from initgen.science import constants
from initgen.science import units as units_mod
from initgen.science.constants import T_FREEZE
from initgen.science.soil import conversion as soil_conversion
from initgen.science.soil import freezing as soil_freezing
from initgen.science.soil import modes as soil_modes
from initgen.science.soil import properties as soil_properties


def _temp_read(role, store, hkey):
    vals = role.read(store, hkey)
    return soil_conversion.temperature_to_kelvin(vals, role.units or "K", name=role.variables[0], key=f"units.{role.name}")


def _temp_stored(role, kelvin: np.ndarray, layered: bool) -> np.ndarray:
    """Temperatures in K as they will read back from the file (type and packing of the variable)."""
    units = role.units or "K"
    vals = kelvin if layered else kelvin[:, 0]
    q = soil_conversion.temperature_to_kelvin(role.stored(soil_conversion.kelvin_to_units(vals, units)), units, name=role.variables[0])
    return q if layered else q[:, None]


def _temp_write(role, store, hkey, kelvin, changed, write):
    if write:
        role.write(store, hkey, soil_conversion.kelvin_to_units(kelvin, role.units or "K"), changed)


_SUCTION_PER_PASCAL = 1.0 / (1000.0 * 9.80616)  # m of water per Pa: psi = p / (rho_w g), science/constants.py set


def _suction_metres(values: np.ndarray, role, model: ModelFile) -> np.ndarray:
    """Saturated matric potential from a file as a suction magnitude in metres of water.

    Lengths (m, cm, mm, also written 'mm H2O' or 'm of water') are converted with their unit;
    pressures (Pa, hPa, kPa, MPa) with psi = p / (rho_w g); both parsed by initgen.science.units
    (cf-units). Missing or unknown units are refused: a suction read in the wrong unit moves the
    freezing curve by orders of magnitude.
    """

    raw = role.units.strip().lower()
    unit = raw.replace("h2o", "").replace("of water", "").replace("water", "").strip()
    where = f"{model.store.describe()}: variable '{role.variables[0]}' (saturated matric potential)"
    if not unit:
        raise InputError(f"{where} has no units attribute; give its units (m, mm, kPa ...) in the file or with "
                         "layout key units.psi_sat")
    pa = units_mod.pascal_per(unit)
    if pa is not None:
        return np.abs(values) * pa * _SUCTION_PER_PASCAL
    m = units_mod.metres_per(unit)
    if m is not None:
        return np.abs(values) * m
    raise InputError(f"{where} has units '{role.units}'; initgen reads lengths of water (m, cm, mm) or "
                     "pressures (Pa, kPa, MPa); fix the attribute or set layout key units.psi_sat")


def _check_range(values: np.ndarray, lo: float, hi: float, model: ModelFile, role_name: str, what: str = "",
                 low_open: bool = True) -> None:
    """Refuse soil parameters outside a physically possible range (usually a unit slip)."""
    v = np.asarray(values, float)
    below = (v <= lo) if low_open else (v < lo)
    bad = np.isfinite(v) & (below | (v > hi))
    if np.any(bad):
        role = model.role(role_name)
        name = what or f"variable '{role.variables[0]}' ({role_name}, units '{role.units}')"
        raise InputError(f"{model.store.describe()}: {name} has {int(bad.sum())} value(s) outside {lo:g}..{hi:g} "
                         f"(e.g. {float(v[bad].flat[0]):.6g}); check its units")


def _hydraulics(plan: Plan, store, hkey, shape, model=None):
    """Porosity, saturated suction (m), Clapp-Hornberger b and solids heat capacity (or None),
    broadcast to ``shape`` (E, L, *h). Cells where a file's parameters are missing get NaN, which
    the soil functions refuse only where the recipe perturbs."""
    model = model or plan.model
    phys = plan.physics

    def role_or_none(name):
        r = model.role(name)
        if r is None:
            return None
        v = r.read(store, hkey)
        return v if r.layered else v[:, None]

    named = [r for r in ("porosity", "psi_sat", "clapp_b") if model.role(r) is not None]
    c_solid = None
    if named and len(named) < 3:
        missing = sorted({"porosity", "psi_sat", "clapp_b"} - set(named))
        raise InputError(f"layout: names {', '.join(named)} but not {', '.join(missing)}; give all three soil "
                         "parameters in the layout, or none (then the recipe's physics section is used)")
    if named:
        por, b = role_or_none("porosity"), role_or_none("clapp_b")
        if model.role("porosity").units.strip().lower() in ("%", "percent"):
            por = por / 100.0
        psi = _suction_metres(role_or_none("psi_sat"), model.role("psi_sat"), model)
        for vals, role, lo, hi in ((por, "porosity", 0.0, 1.0), (psi, "psi_sat", 1e-4, 10.0),
                                   (b, "clapp_b", 0.0, 30.0)):
            _check_range(vals, lo, hi, model, role)
    elif model.role("sand") is not None and model.role("clay") is not None:
        sand = units_mod.percent_content(role_or_none("sand"), model.role("sand"), "sand")
        clay = units_mod.percent_content(role_or_none("clay"), model.role("clay"), "clay")
        _check_range(sand, 0.0, 100.0, model, "sand", low_open=False)
        _check_range(clay, 0.0, 100.0, model, "clay", low_open=False)
        _check_range(sand + clay, 0.0, 100.0, model, "sand", what="sand + clay", low_open=False)
        ok = np.isfinite(sand) & np.isfinite(clay)
        sand_ok, clay_ok = np.where(ok, sand, 40.0), np.where(ok, clay, 20.0)
        por, psi, b = (np.where(ok, x, np.nan) for x in soil_properties.cosby_1984(sand_ok, clay_ok))
        c_solid = np.where(ok, soil_properties.soil_solid_heat_capacity(sand_ok, clay_ok), np.nan)
    elif phys.sand_pct is not None and phys.clay_pct is not None:
        por, psi, b = soil_properties.cosby_1984(phys.sand_pct, phys.clay_pct)
        c_solid = soil_properties.soil_solid_heat_capacity(phys.sand_pct, phys.clay_pct)
    elif phys.texture:
        por, psi, b = soil_properties.hydraulics_from_texture(phys.texture)
        c_solid = soil_properties.texture_solid_heat_capacity(phys.texture)
    elif phys.porosity and phys.psi_sat_m and phys.clapp_b:
        por, psi, b = phys.porosity, phys.psi_sat_m, phys.clapp_b
    else:
        raise InputError("recipe key physics: a physics mode needs soil hydraulic parameters; give physics.texture, "
                         "physics.sand_pct and clay_pct, or porosity, psi_sat_m and clapp_b (or name them in the layout)", key="physics")
    if phys.organic_fraction is not None:
        if named:
            raise InputError("recipe key physics.organic_fraction: the layout gives the model's own soil parameters "
                             f"({', '.join(named)}); blend organic soil into recipe parameters only (remove one)", key="physics.organic_fraction")
        (por, psi, b), c_solid = soil_properties.blend_organic(
            (por, psi, b), constants.CV_SOLID_DEFAULT if c_solid is None else c_solid, phys.organic_fraction)
    out = tuple(np.broadcast_to(np.asarray(x, float), shape) for x in (por, psi, b))
    return out + (None if c_solid is None else np.broadcast_to(np.asarray(c_solid, float), shape),)


def soil_parameter_sources(physics: Physics, model: ModelFile) -> dict:
    """Where the soil parameters of a physics mode come from, in words (for check and the ledger):
    the same order of precedence as :func:`_hydraulics`."""
    named = [r for r in ("porosity", "psi_sat", "clapp_b") if model.role(r) is not None]
    default_cs = (f"default {constants.CV_SOLID_DEFAULT:.5g} J m-3 K-1 (texture formula at equal sand and clay; "
                  "a choice of initgen: give sand/clay or a texture to set it)")
    if named:
        hyd, cs = "file variables " + ", ".join(model.role(r).variables[0] for r in named), default_cs
    elif model.role("sand") is not None and model.role("clay") is not None:
        hyd = "Cosby et al. (1984) Table 5 from the file's sand and clay"
        cs = "texture formula (de Vries 1963 values) from the file's sand and clay"
    elif physics.sand_pct is not None:
        hyd = f"Cosby et al. (1984) Table 5 at sand {physics.sand_pct:g} %, clay {physics.clay_pct:g} %"
        cs = "texture formula (de Vries 1963 values) at the same sand and clay"
    elif physics.texture:
        sand, clay = soil_properties.TEXTURE_CLASS_CENTROID_PCT.get(physics.texture, (None, None))
        hyd = f"Clapp and Hornberger (1978) Table 2, {physics.texture}"
        cs = (f"texture formula at the class centroid (sand {sand:g} %, clay {clay:g} %)" if sand is not None
              else "texture formula at the class centroid")
    else:
        hyd, cs = "recipe constants porosity, psi_sat_m, clapp_b", default_cs
    out = {"hydraulics": hyd, "solids_heat_capacity": cs}
    if physics.organic_fraction is not None:
        out["organic_fraction"] = (f"{physics.organic_fraction:g}, blended linearly with the organic soil of "
                                   "Lawrence and Slater (2008)")
    return out


def _water_spec(plan: Plan, model: ModelFile):
    """The water convention of ``model`` (the input, or a donor read with the input's layout)."""

    if model.water is not None:
        return model.water
    lay = plan.model.layout
    return water_mod.resolve(model.roles, lay.view if lay is not None else None, model.store.describe(), True)


def _water_values(spec, rname: str, raw: np.ndarray, dz, por, name: str) -> np.ndarray:
    """One water variable as stored -> m3 m-3 as stored (a phase fraction -> fraction of 1)."""

    if rname in FRACTION_ROLES:
        return np.asarray(raw, float) * fraction_factor(spec.units[rname])
    return soil_conversion.water_to_volumetric(raw, spec.units[rname], dz, porosity=por, name=name)


def _water_file_values(spec, liq: np.ndarray, ice: np.ndarray) -> dict:
    """The physics' liquid and ice (m3 m-3, ice liquid-equivalent) -> the values of the file's own
    water variables (m3 m-3 as stored, or fractions of 1), by role. The physics conserves water
    mass, so a total moves only where a donor blend changes it, or where it holds the true ice
    volume (the same mass fills another volume once melted or frozen): see _write_water."""
    conv, reading = spec.convention, spec.reading
    out = {}
    if conv == "liquid_and_ice":
        out["soil_liquid"] = liq
        out["soil_ice"] = soil_conversion.water_equivalent_to_ice_volume(ice, reading)
        return out
    if conv == "total_and_liquid":
        out["soil_liquid"] = liq
    elif conv in ("total_and_frozen_fraction", "total_and_unfrozen_fraction"):
        f = soil_conversion.frozen_fraction(liq, ice)
        out[spec.roles[1]] = f if conv == "total_and_frozen_fraction" else 1.0 - f
    out["soil_water_total"] = soil_conversion.total_from_phases(liq, ice, reading)
    return out


TOTAL_ROUNDING = 1e-12  # m3 m-3 (relative to 1 + total): a total that moved less is round-off, kept as stored


def _read_water(plan: Plan, store, hkey, shape, donor: ModelFile | None = None) -> dict:
    """Soil liquid and ice (m3 m-3, ice as liquid-water equivalent) from the file's own water
    convention (io/water.py), with the layer geometry and soil parameters the physics needs."""
    model = donor or plan.model
    src = model.store if donor else store
    nh = len(model.grid.shape)
    layers = plan.model.layers
    if layers is None:
        raise InputError(f"{plan.model.store.describe()}: a physics mode needs soil layer thicknesses; name "
                         "roles.layer_node_depth (or interfaces/thickness) in the layout")
    dz = np.broadcast_to(_layer_col(np.asarray(layers.thickness_m), nh), shape)
    por, psi, b, c_solid = _hydraulics(plan, src, hkey, shape, model=model)
    out = {"dz": dz, "porosity": por, "psi": psi, "b": b, "c_solid": c_solid}
    spec = _water_spec(plan, model)
    where = src.describe()
    raw, vol, names = {}, {}, {}
    for rname in spec.roles:
        role = model.role(rname)
        r = role.read(src, hkey)
        raw[rname] = r if role.layered else r[:, None]
        names[rname] = "+".join(role.variables)
        vol[rname] = _water_values(spec, rname, raw[rname], dz, por, role.variables[0])
    conv, reading = spec.convention, spec.reading
    units = spec.units
    if conv == "liquid_and_ice":
        liq, ice = vol["soil_liquid"], soil_conversion.ice_volume_to_water_equivalent(vol["soil_ice"], reading)
        out["liq_name"], out["ice_name"] = (f"{where}: variable '{names[r]}'" for r in ("soil_liquid", "soil_ice"))
        out["liq_units"], out["ice_units"] = units["soil_liquid"], units["soil_ice"]
    elif conv == "total_only":
        # the file holds no split: diagnose it from the temperature (the equilibrium phase rule)
        troles = model.require("soil_temperature", "a total-only water convention splits water by temperature")
        T = _temp_read(troles, src, hkey)
        T = T if troles.layered else T[:, None]
        W = vol["soil_water_total"]
        ok = np.isfinite(T) & np.isfinite(W)
        liq, ice = soil_freezing.equilibrate_phase(np.where(ok, T, T_FREEZE + 1.0), np.where(ok, W, 0.0), 0.0, por, psi, b)
        bad = ok & ~(np.isfinite(liq) & np.isfinite(ice))  # soil parameters missing: no split known
        liq, ice = np.where(ok & ~bad, liq, W), np.where(ok & ~bad, ice, np.where(bad, np.nan, 0.0))
        out["liq_name"] = f"{where}: liquid diagnosed from total '{names['soil_water_total']}'"
        out["ice_name"] = f"{where}: ice diagnosed from total '{names['soil_water_total']}'"
        out["liq_units"] = out["ice_units"] = units["soil_water_total"]
    else:
        other = spec.roles[1]
        kind = {"soil_liquid": "liquid", "soil_frozen_fraction": "frozen_fraction",
                "soil_unfrozen_fraction": "unfrozen_fraction"}[other]
        liq, ice = soil_conversion.phases_from_total(vol["soil_water_total"], vol[other], kind, reading)
        tot = names["soil_water_total"]
        if kind == "liquid":
            out["liq_name"] = f"{where}: variable '{names[other]}'"
            out["ice_name"] = f"{where}: ice = total - liquid ('{tot}' - '{names[other]}')"
        else:
            out["liq_name"] = f"{where}: liquid from '{tot}' and '{names[other]}'"
            out["ice_name"] = f"{where}: ice from '{tot}' and '{names[other]}'"
        out["liq_units"] = units[other] if kind == "liquid" else units["soil_water_total"]
        out["ice_units"] = units["soil_water_total"]
    out["liq"], out["ice"] = np.asarray(liq, float), np.asarray(ice, float)
    out["liq0"], out["ice0"] = out["liq"].copy(), out["ice"].copy()
    out["spec"], out["raw"] = spec, raw
    return out


def _physics(T_old, T_new, water, sel, phys, led, area, nh, mode, dT=None):
    """Impose the change on the selected cells and bring water phase into line."""
    kw = dict(porosity=water["porosity"], psi_sat_m=water["psi"], b=water["b"], c_solid=water["c_solid"])
    for key in ("liq", "ice"):
        # round-off negatives (a model's own arithmetic leaves -1e-12 kg m-2 about) become 0, counted
        tiny = sel & (water[key] < 0) & (water[key] >= -NEGATIVE_WATER_ROUNDING)
        if np.any(tiny):
            led.clamp(f"soil_{key}_rounding_negative_to_zero", np.count_nonzero(tiny))
            water[key] = np.where(tiny, 0.0, water[key])
        bad = sel & ~((water[key] >= 0) & np.isfinite(water[key]))
        if np.any(bad):
            raise InputError(f"{water[key + '_name']} has {int(bad.sum())} negative or missing value(s) in cells the "
                             "recipe perturbs; fix the file, or mark missing cells with its _FillValue")
        over = sel & (water[key] > 1.0 + 1e-6)
        if np.any(over):
            raise InputError(f"{water[key + '_name']} holds more water than the layer's volume in {int(over.sum())} "
                             f"perturbed cell(s) when read as '{water[key + '_units']}'; check its units attribute "
                             "(kg m-2, m3 m-3 or saturation_fraction)")
    rule = effective_phase_rule(phys, water["spec"])
    if mode == "energy":
        res = soil_modes.apply_energy_mode(T_old, water["liq"], water["ice"], dT, water["dz"], rule=rule, **kw)
    else:
        res = soil_modes.apply_temperature_mode(T_old, water["liq"], water["ice"], T_new - T_old, water["dz"], rule=rule,
                                          **kw)
    T = np.where(sel, res.T, T_old)
    _check_invariants(T_old, water, res, sel, dT if mode == "energy" else T_new - T_old, mode, rule, led, area, kw)
    water["liq"] = np.where(sel, res.liq, water["liq"])
    water["ice"] = np.where(sel, res.ice, water["ice"])
    # total water is conserved, so a layer holding more than its pores did so before the change:
    # it is reported, not "corrected" (removing water would break the water budget)
    over = sel & (water["liq"] + water["ice"] > water["porosity"] * (1.0 + 1e-9))
    led.flag("water_above_porosity_kept", np.count_nonzero(over))
    # warming cannot freeze water and cooling cannot melt ice: where it does, the starting state
    # was not in phase equilibrium for these soil parameters (in either mode)
    imposed = dT if mode == "energy" else T_new - T_old
    against = sel & (((imposed > 0) & (res.frozen_kg_m2 > PHASE_TOL_KG)) | ((imposed < 0) & (res.melted_kg_m2 > PHASE_TOL_KG)))
    led.flag("phase_change_against_imposed_change", np.count_nonzero(against))
    a = _bcast_h(area, 2)
    for key, arr in (("frozen_kg", res.frozen_kg_m2), ("melted_kg", res.melted_kg_m2),
                     ("sensible_J", res.sensible_J_m2), ("latent_J", res.latent_J_m2)):
        vals = np.where(sel, arr, 0.0) * a
        led.add_phase(key, vals.sum(axis=tuple(i for i in range(vals.ndim) if i != 1)))
    return T


def _check_invariants(T_old, water, res, sel, imposed, mode, rule, led, area, kw) -> None:
    """Measure the physics' promises on the cells it changed and put them in the ledger:
    water (liquid + ice) conserved; the temperature change never opposite to the imposed one;
    energy mode: |dT| <= |imposed dT| and the enthalpy change equal to C0 dT dz; temperature
    mode: dT equal to the imposed change."""
    s = sel & np.isfinite(res.T)
    if not np.any(s):
        return
    dz = water["dz"]
    w0 = (water["liq"] + water["ice"])[s]
    w1 = (res.liq + res.ice)[s]
    a = np.broadcast_to(_bcast_h(area, 2), s.shape)[s] * dz[s] * constants.RHO_WATER
    dT = (res.T - T_old)[s]
    imp = imposed[s]
    inv = led.invariants
    inv["water_before_kg"] += float((w0 * a).sum())
    inv["water_change_kg"] += float(((w1 - w0) * a).sum())
    inv["cells_checked"] += int(s.sum())
    inv["cells_opposite_sign"] += int(np.count_nonzero(dT * imp < 0))
    if mode == "energy":
        inv["cells_beyond_imposed"] += int(np.count_nonzero(np.abs(dT) > np.abs(imp) * (1 + 1e-12) + 1e-9))
        liq0, ice0 = water["liq"], water["ice"]
        if rule == "equilibrium":
            liq0, ice0 = soil_freezing.equilibrate_phase(np.where(sel, T_old, constants.T_FREEZE), liq0, ice0,
                                                kw["porosity"], kw["psi_sat_m"], kw["b"])
        C0 = soil_properties.heat_capacity(liq0, ice0, kw["porosity"], kw["c_solid"])
        target = (C0 * imposed * dz)[s]
        err = np.abs((res.sensible_J_m2 + res.latent_J_m2)[s] - target)
        # relative to the target, or to the round-off of the layer's enthalpy where the target is
        # smaller than that (a profile factor of 1e-26 imposes nothing the solver can resolve)
        H0 = (np.abs(C0 * (T_old - constants.T_FREEZE)) + RHO_LF * (liq0 + ice0) + C0)[s] * dz[s]
        denom = np.maximum(np.abs(target), 1e-12 * H0)
        inv["max_energy_budget_rel_error"] = max(inv["max_energy_budget_rel_error"], float((err / denom).max()))
        # the phase change is what the imposed energy pays for: |d ice| rho_w L_f dz <= |C0 dT dz|
        dice = np.abs(res.ice - ice0)[s] * RHO_LF * dz[s]
        inv["cells_phase_change_beyond_energy"] += int(np.count_nonzero(dice > np.abs(target) * (1 + 1e-9) + 1e-9 * H0))
    else:
        inv["cells_not_exact"] += int(np.count_nonzero(dT != imp))
        latent = np.abs(res.latent_J_m2[s])
        sensible_budget = np.abs((soil_properties.heat_capacity(water["liq"], water["ice"], kw["porosity"], kw["c_solid"])
                                  * imposed * dz)[s])
        # temperature mode sets T exactly: melting all ice on crossing 0 C can cost far more than
        # the sensible heat of the change; worth a look, since energy mode would differ
        led.flag("temperature_mode_latent_heat_beyond_imposed_energy",
                 np.count_nonzero(latent > sensible_budget * (1 + 1e-9) + 1e-6))
    # consistent before (no liquid above the curve below 0 C, no ice above 0 C), consistent after
    T1 = res.T
    cons0 = _one_sided_consistent(T_old, water["liq"], water["ice"], kw)
    cons1 = _one_sided_consistent(T1, res.liq, res.ice, kw)
    inv["cells_made_inconsistent"] += int(np.count_nonzero((cons0 & ~cons1)[s]))


RHO_LF = constants.RHO_WATER * constants.LATENT_HEAT_FUSION   # J per m3 of liquid water


def _one_sided_consistent(T, liq, ice, kw, tol=1e-9) -> np.ndarray:
    return soil_freezing.one_sided_consistent(T, liq, ice, kw["porosity"], kw["psi_sat_m"], kw["b"], tol=tol)


def effective_phase_rule(physics: Physics, water_spec) -> str:
    """The recipe's phase rule, except for a file that keeps only total water: its model
    diagnoses the liquid/ice split from temperature, which is the equilibrium rule."""
    if water_spec is not None and getattr(water_spec, "phase_split_diagnosed", False):
        return "equilibrium"
    return physics.phase_rule


def _report_input_shift(T0, water, inside, led, area) -> None:
    """Per layer: input cells off the freezing curve and the kg the equilibrium rule would move."""
    ok = inside & np.isfinite(T0) & np.isfinite(water["liq"]) & np.isfinite(water["ice"])
    with np.errstate(invalid="ignore"):
        shift = soil_freezing.equilibrium_shift(np.where(ok, T0, constants.T_FREEZE), water["liq"], water["ice"],
                                       water["porosity"], water["psi"], water["b"])
    # shifts within the tolerance of soil_freezing.disequilibrium (1e-4 m3 m-3: float32 storage, slightly
    # different constants) are not counted
    shift = np.where(ok & (np.abs(shift) > soil_freezing.DISEQUILIBRIUM_TOL), shift, 0.0)
    kg_m2 = shift * water["dz"] * constants.RHO_WATER
    moved = shift != 0
    a = _bcast_h(area, 2)
    axes = tuple(i for i in range(kg_m2.ndim) if i != 1)
    # states a one-sided model would not hold either (liquid above the curve below 0 C, ice above
    # 0 C); ice beside liquid below the curve is stable for it and not counted here
    off = ok & ~_one_sided_consistent(T0, water["liq"], water["ice"],
                                      {"porosity": water["porosity"], "psi_sat_m": water["psi"], "b": water["b"]},
                                      tol=soil_freezing.DISEQUILIBRIUM_TOL)
    led.add_input_shift(moved.sum(axis=axes), (np.maximum(kg_m2, 0.0) * a).sum(axis=axes),
                        (np.maximum(-kg_m2, 0.0) * a).sum(axis=axes), off.sum(axis=axes))


def _equilibrate_blend(T, water, sel, led, area, rule) -> None:
    """Bring a donor-blended state into line with the phase rule at its blended temperature.

    A blend of two consistent states need not be consistent itself (the freezing curve is not
    linear). Change-driven rule: liquid above the supercooled limit freezes and ice above 0 C
    melts, nothing else (:func:`soil_modes.settle_one_sided`). Equilibrium rule: the split is put on
    the freezing curve (:func:`soil_freezing.equilibrate_phase`). Water is conserved.
    """
    ok = sel & np.isfinite(T)
    settle = soil_freezing.equilibrate_phase if rule == "equilibrium" else soil_modes.settle_one_sided
    liq, ice = settle(np.where(ok, T, T_FREEZE), water["liq"], water["ice"], water["porosity"], water["psi"],
                      water["b"])
    dice = np.where(ok, ice - water["ice"], 0.0)
    water["liq"] = np.where(ok, liq, water["liq"])
    water["ice"] = np.where(ok, ice, water["ice"])
    led.flag("donor_blend_re_equilibrated", np.count_nonzero(np.abs(dice) > 1e-12))
    a = _bcast_h(area, 2) * water["dz"] * constants.RHO_WATER  # m3 m-3 of water -> kg, times m2
    for key, vals in (("frozen_kg", np.maximum(dice, 0.0)), ("melted_kg", np.maximum(-dice, 0.0))):
        per = vals * a
        led.add_phase(key, per.sum(axis=tuple(i for i in range(per.ndim) if i != 1)))


PHASE_TOL_KG = 1e-6  # kg m-2 of water changing phase below which a cell is not flagged
NEGATIVE_WATER_ROUNDING = 1e-9  # m3 m-3: negative water this small is round-off, set to 0 (counted)
DEPARTURE_K = 0.05  # realised minus imposed change beyond which a cell is flagged (K)


def _flag_departures(led, realised: np.ndarray, imposed: np.ndarray, sel: np.ndarray) -> None:
    """Count cells whose temperature moved against the imposed change, or by clearly more than it.

    Latent heat can only damp an imposed change (water freezes as soil cools, ice melts as it
    warms). A change of the opposite sign, or larger than imposed, means the starting state was
    not in phase equilibrium for the soil parameters used: its water froze or melted on its own.
    """
    big = sel & (np.abs(imposed) > 0)
    opposite = big & (realised * imposed < 0) & (np.abs(realised) > DEPARTURE_K)
    larger = big & ~opposite & (np.abs(realised) > np.abs(imposed) + DEPARTURE_K)
    led.flag("realised_change_opposite_to_imposed", np.count_nonzero(opposite))
    led.flag("realised_change_larger_than_imposed", np.count_nonzero(larger))


def _write_water(plan, store, hkey, water, inside, led, area, write):
    """Write the physics' liquid and ice back in the file's own convention: only the variables
    that can move (in total_and_liquid the liquid moves and the total stays), only where the
    state moved, rounded as the file stores them."""
    model = plan.model
    spec = water["spec"]
    new_vals = _water_file_values(spec, water["liq"], water["ice"])
    old_vals = _water_file_values(spec, water["liq0"], water["ice0"])
    for rname, vals in new_vals.items():
        role = model.role(rname)
        old = water["raw"][rname]  # as read, in the file's units
        moved = inside & (vals != old_vals[rname]) & np.isfinite(vals)
        if rname == "soil_water_total":  # conserved by the physics up to round-off: the total stays
            moved &= np.abs(vals - old_vals[rname]) > TOTAL_ROUNDING * (1.0 + np.abs(old_vals[rname]))
        if rname in ("soil_frozen_fraction", "soil_unfrozen_fraction"):
            new = vals / fraction_factor(spec.units[rname])
        else:
            new = soil_conversion.volumetric_to_water(vals, spec.units[rname], water["dz"], porosity=water["porosity"])
        new = np.where(moved, role.stored(new if role.layered else new[:, 0]).reshape(new.shape), old)
        changed = inside & (new != old) & ~(np.isnan(new) & np.isnan(old))
        led.stats(role.variables[0] if len(role.variables) == 1 else "+".join(role.variables), rname,
                  spec.units[rname], new.shape[1], role.layered).add(np.where(changed, new - old, 0.0), inside, area)
        if write:
            role.write(store, hkey, new if role.layered else new[:, 0], changed if role.layered else changed[:, 0])
