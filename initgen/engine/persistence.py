"""How long the imposed anomaly lasts: an idealised conduction bound, accumulated block by block.

For every perturbed column the realised soil temperature change is left to conduct in the
model's own layers with the surface anomaly held at zero (the atmosphere forgets at once) and no
flux at the bottom; the heat left after each horizon is summed over the region. Latent heat is
left out (it would slow the decay where water freezes or melts). This is a lower bound of the
persistence under those assumptions, not a forecast of the model's behaviour.

Sources of the soil properties, in order: the recipe's ``persistence.conductivity_W_m_K`` and
``persistence.heat_capacity_J_m3_K`` when given; otherwise the soil state read by a physics mode:
heat capacity by de Vries (1963) mixing (``soil_properties.heat_capacity``) and conductivity by Johansen
(1975) (``conduction.johansen_conductivity``) with the quartz content of the recipe's texture
class (Peters-Lidard et al. 1998) or its sand fraction. When neither is available the ledger
says why and gives no numbers: no silent default.
"""

from __future__ import annotations

import numpy as np

from initgen.engine.ledger_view import Persistence

from initgen.science import conduction, units
from initgen.science.soil import properties as soil_properties

STEPS_PER_INTERVAL = 16  # at least this many backward-Euler steps between horizons ...
MAX_STEP_DAYS = 1.0  # ... each at most a day (time error < 0.005 in the fraction, tests/science/test_conduction.py)
COARSE_SAND_PCT = 70.0  # sand_pct at or above which Johansen's coarse (sand) Kersten relation is used

ASSUMPTIONS = ("pure heat conduction of the realised soil temperature change in the model's own layers; "
               "surface anomaly held at zero from the start (the atmosphere forgets at once: a lower bound); "
               "no heat flux at the bottom of the lowest layer; latent heat of freezing and melting left out "
               "(it would slow the decay where water changes phase); heat capacity and conductivity fixed at "
               "the perturbed state; backward Euler with at least {steps} steps between horizons, each at most {maxstep:g} day; remaining_fraction = "
               "sum over perturbed columns of area x sign(initial heat) x heat left / sum of area x |initial "
               "heat|. An idealised bound, not a forecast of the model.")


def settings(plan) -> dict:
    """Decide once per plan where heat capacity and conductivity come from (or why not)."""
    rec = plan.recipe.view.persistence
    phys = plan.physics
    horizons = [float(h) for h in rec.horizons_days]
    k_const, c_const = rec.conductivity_W_m_K, rec.heat_capacity_J_m3_K
    out = {"horizons_days": horizons, "k": k_const, "C": c_const, "reason": None, "quartz": None,
           "coarse": False, "sand_role": False}
    model = plan.model
    if model.layers is None:
        out["reason"] = "the model's layer thicknesses are unknown (name the layer depths in the layout)"
        return out
    state = phys.active
    if c_const is None and not state:
        out["reason"] = ("physics.mode is none, so the soil water is not read; give physics.mode, or "
                         "persistence.heat_capacity_J_m3_K and persistence.conductivity_W_m_K in the recipe")
        return out
    out["heat_capacity_source"] = ("recipe persistence.heat_capacity_J_m3_K" if c_const is not None else
                                   "soil state, de Vries (1963) mixing (soil_properties.heat_capacity)")
    if k_const is not None:
        out["conductivity_source"] = "recipe persistence.conductivity_W_m_K"
        return out
    if not state:
        out["reason"] = ("physics.mode is none, so the soil water is not read; give physics.mode or "
                         "persistence.conductivity_W_m_K in the recipe")
        return out
    if model.role("sand") is not None and all(model.role(r) is None for r in ("porosity", "psi_sat", "clapp_b")):
        out["sand_role"] = True
        out["conductivity_source"] = ("soil state, Johansen (1975), quartz fraction = the layout's sand fraction "
                                      f"(coarse Kersten relation where sand >= {COARSE_SAND_PCT:g} %)")
    elif phys.sand_pct is not None and model.role("porosity") is None:
        out["quartz"] = phys.sand_pct / 100.0
        out["coarse"] = phys.sand_pct >= COARSE_SAND_PCT
        out["conductivity_source"] = (f"soil state, Johansen (1975), quartz fraction {out['quartz']:.2f} = "
                                      "physics.sand_pct / 100")
    elif phys.texture and model.role("porosity") is None:
        key = soil_properties.texture_key(phys.texture)
        out["quartz"] = conduction.QUARTZ_BY_TEXTURE.get(key)
        out["coarse"] = key in conduction.COARSE_TEXTURES
        out["conductivity_source"] = (f"soil state, Johansen (1975), quartz fraction {out['quartz']} for texture "
                                      f"'{key}' (Peters-Lidard et al. 1998)")
    if out["quartz"] is None and not out["sand_role"]:
        out["reason"] = ("the quartz content Johansen's conductivity needs is unknown (the soil parameters come "
                         "from the layout or as constants); give persistence.conductivity_W_m_K in the recipe")
    elif phys.organic_fraction:
        # the porosity in the conductivity is the blended one, the solids and dry conductivities the
        # mineral ones: said, not hidden
        out["conductivity_source"] += (f"; physics.organic_fraction {phys.organic_fraction:g} blends the "
                                       "porosity only, not the solids or dry conductivity (mineral values)")
    return out


class Accumulator:
    """Area-weighted sums over the perturbed columns, added block by block."""

    def __init__(self, cfg: dict, nlayers: int):
        self.cfg = cfg
        nh = len(cfg["horizons_days"])
        self.abs_heat0 = 0.0
        self.heat_left = np.zeros(nh)
        self.change = np.zeros((nh, nlayers))
        self.area = 0.0
        self.columns = 0
        self.skipped = 0  # perturbed columns left out: a layer without a valid value or soil property
        self.k_sum = np.zeros(nlayers)
        self.c_sum = np.zeros(nlayers)

    def add(self, dT: np.ndarray, dz: np.ndarray, C: np.ndarray, k: np.ndarray, area: np.ndarray) -> None:
        """dT, C, k: (N, L); dz: (L,); area: (N,) in m2."""
        if dT.shape[0] == 0:
            return
        times = np.asarray(self.cfg["horizons_days"]) * 86400.0
        out = conduction.conduct(dT, dz, C, k, times, min_steps=STEPS_PER_INTERVAL, max_step_s=MAX_STEP_DAYS * 86400.0)
        cap = C * dz
        h0 = (cap * dT).sum(axis=1)
        sign = np.sign(h0)
        self.abs_heat0 += float((area * np.abs(h0)).sum())
        self.heat_left += ((out * cap[None]).sum(axis=2) * (area * sign)[None]).sum(axis=1)
        self.change += (out * area[None, :, None]).sum(axis=1)
        self.area += float(area.sum())
        self.columns += dT.shape[0]
        self.k_sum += (k * area[:, None]).sum(axis=0)
        self.c_sum += (C * area[:, None]).sum(axis=0)

    def finish(self) -> Persistence:
        """The ledger's ``persistence`` section: the estimate, or why there is none."""
        cfg = self.cfg
        horizons = tuple(float(h) for h in cfg["horizons_days"])
        if cfg.get("reason"):
            return Persistence(horizons, None, cfg["reason"])
        if self.columns == 0 or self.abs_heat0 <= 0 or self.area <= 0:
            return Persistence(horizons, None, "no perturbed soil column changed")
        r = lambda v: float(np.round(float(v), 6))  # noqa: E731
        return Persistence(
            horizons_days=horizons,
            remaining_fraction=tuple(r(v / self.abs_heat0) for v in self.heat_left),
            remaining_change_per_layer_K=tuple(tuple(r(v / self.area) for v in row) for row in self.change),
            columns=int(self.columns),
            columns_left_out=int(self.skipped),
            conductivity_source=cfg.get("conductivity_source"),
            heat_capacity_source=cfg.get("heat_capacity_source"),
            mean_conductivity_per_layer_W_m_K=tuple(r(v / self.area) for v in self.k_sum),
            mean_heat_capacity_per_layer_J_m3_K=tuple(float(np.round(v / self.area, 1)) for v in self.c_sum),
            assumptions=ASSUMPTIONS.format(steps=STEPS_PER_INTERVAL, maxstep=MAX_STEP_DAYS))


def add_block(plan, led, T0, T, water, inside, area, store=None, hkey=None) -> None:
    """Add one block's perturbed columns. T0, T: (E, L, *h) in K; inside: same shape (bool);
    area: (*h) land area in m2; water: the physics-mode dict (after the change) or None."""
    acc = led.persistence
    nl = T.shape[1]
    if acc is None:
        acc = led.persistence = Accumulator(settings(plan), nl)
    cfg = acc.cfg
    if cfg.get("reason"):
        return
    dz = np.asarray(plan.model.layers.thickness_m, float)
    if dz.size != nl:
        cfg["reason"] = f"the layer thicknesses describe {dz.size} layers but soil temperature has {nl}"
        return

    def cols(a):  # (E, L, *h) -> (E * prod(h), L)
        a = np.broadcast_to(a, T.shape)
        return np.moveaxis(a, 1, -1).reshape(-1, nl)

    dT = cols(np.where(inside, T - T0, 0.0))
    changed = np.any(dT != 0, axis=1)
    a = np.broadcast_to(area.reshape((1,) + area.shape), (T.shape[0],) + area.shape).reshape(-1)
    changed &= a > 0
    ok = changed & cols(inside).all(axis=1) & np.isfinite(dT).all(axis=1)
    if not np.any(ok):
        acc.skipped += int(changed.sum())
        return
    if cfg["C"] is not None:
        C = np.full(dT.shape, float(cfg["C"]))
    else:
        C = cols(soil_properties.heat_capacity(water["liq"], water["ice"], water["porosity"], c_solid=water["c_solid"]))
    if cfg["k"] is not None:
        k = np.full(dT.shape, float(cfg["k"]))
    else:
        if cfg["sand_role"]:
            role = plan.model.role("sand")
            sand = role.read(store, hkey)
            sand = sand if role.layered else sand[:, None]
            sand = np.broadcast_to(units.percent_content(sand, role, "sand"), T.shape)  # the physics' percent rule
            quartz, coarse = sand / 100.0, sand >= COARSE_SAND_PCT
        else:
            quartz, coarse = cfg["quartz"], cfg["coarse"]
        k = cols(conduction.johansen_conductivity(water["liq"], water["ice"], water["porosity"], quartz, coarse))
    good = ok & np.isfinite(C).all(axis=1) & np.isfinite(k).all(axis=1) & (C > 0).all(axis=1) & (k > 0).all(axis=1)
    acc.skipped += int(changed.sum() - good.sum())
    acc.add(dT[good], dz, C[good], k[good], a[good])


def line(persist: dict | None) -> str:
    """One line for the terminal and the reports."""
    if not persist:
        return "persistence: not estimated (no soil temperature change)"
    hz = persist.get("horizons_days", [])
    if persist.get("remaining_fraction") is None:
        return f"persistence: not estimated: {persist.get('not_estimated', 'unknown reason')}"
    parts = ", ".join(f"{f * 100:.0f} % after {h:g} d" for h, f in zip(hz, persist["remaining_fraction"]))
    skipped = persist.get("columns_left_out") or 0
    note = (f" ({skipped} perturbed column(s) left out: a layer without a valid value or soil property)"
            if skipped else "")
    return (f"persistence (idealised conduction bound, surface anomaly held at 0, latent heat left out): "
            f"heat anomaly left {parts}{note}")


__all__ = ["settings", "Accumulator", "add_block", "line", "ASSUMPTIONS", "STEPS_PER_INTERVAL", "MAX_STEP_DAYS"]
