"""The ledger as the terminal shows it: one compact plain-text table, read through the ledger's
typed view (:mod:`initgen.engine.ledger_view`). ``initgen.api.ledger_text`` is this function."""

from __future__ import annotations

from initgen.engine.ledger_view import LedgerView
from initgen.engine.persistence import line as persistence_line


def ledger_text(ledger) -> str:
    """A compact plain-text table of a ledger (what the terminal shows).

    Parameters
    ----------
    ledger : dict or LedgerView
        What :func:`preview` returns, or ``record["ledger"]`` of a provenance record.

    Returns
    -------
    str
        The region, per changed variable and layer the cells changed and the mean, min and max
        change, clamps, flags, the physics, the persistence estimate, the invariants and what
        initgen inferred or guessed (one ``inferred (key): ...`` line per ledger note).

    Notes
    -----
    Raises nothing on a ledger of an older record: parts it lacks are left out of the text.

    Examples
    --------
    >>> print(initgen.api.ledger_text(initgen.preview("recipe.yaml", "restart.nc")))  # doctest: +SKIP
    """
    led = LedgerView.from_dict(ledger)
    lines = []
    reg = led.region
    if reg.area_m2 is None:
        lines.append(f"region: {reg.cells_weight_above_0} cells with weight > 0 "
                     f"({reg.cells_full_weight} at full weight); area {reg.area_is or 'not known'}")
    else:
        lines.append(f"region: {reg.cells_weight_above_0} cells with weight > 0 "
                     f"({reg.cells_full_weight} at full weight), {reg.area_is or 'area'} "
                     f"{reg.area_m2 / 1e6:,.0f} km2; means and totals below are over this area")
    for name, var in led.variables.items():
        lines.append(f"{name} ({var.role}, change in {var.units}; mean_region: mean over region, area-weighted over the region's valid cells, unchanged ones as 0):")
        lines.append(f"  {'layer':>5} {'depth_m':>8} {'changed':>8} {'mean_region':>11} {'min':>9} {'max':>9}")
        for r in var.rows:
            depth = r.node_depth_m
            dtext = f"{depth:8.3f}" if depth is not None else f"{'-':>8}"
            fmt = (lambda v: f"{v:9.4g}" if v is not None else f"{'-':>9}")
            am = r.area_weighted_mean
            lines.append(f"  {r.layer:>5} {dtext} {r.cells_changed:>8} "
                         f"{(f'{am:11.4g}' if am is not None else '-'.rjust(11))} {fmt(r.min)} {fmt(r.max)}")
    if led.clamps:
        lines.append("clamps: " + ", ".join(f"{k} {v}" for k, v in led.clamps.items()))
    else:
        lines.append("clamps: none")
    if led.flags:
        lines.append("flags: " + ", ".join(f"{k} {v}" for k, v in led.flags.items()))
    phys = led.physics
    extra = [f"{k} {v:.4g}" for k, v in phys.totals]
    rule = f", phase rule {phys.phase_rule}" if phys.phase_rule else ""
    lines.append(f"physics: mode {phys.mode}{rule}" + (("; " + ", ".join(extra)) if extra else ""))
    geom = led.grid.soil_layers or ()
    said = sorted({g.source for g in geom if "layer middle" in g.source or "halfway" in g.source
                   or "unknown" in g.source})
    if said:
        lines.append("soil layer geometry: " + "; ".join(said))
    if phys.totals_left_out:
        lines.append(f"totals in kg and J left out: {phys.totals_left_out}")
    if led.persistence is not None:
        lines.append(persistence_line(led.persistence.to_dict()))
    water = led.water
    if water:
        lines.append(f"soil water: {water['convention']} ({water['convention_from']}); volumetric ice "
                     f"{water['volumetric_ice'].replace('_', ' ')} ({water['volumetric_ice_from']})"
                     + ("; liquid/ice split diagnosed from the soil temperature" if water["phase_split_diagnosed"]
                        else ""))
    inv = phys.invariants
    if inv is not None and inv.to_dict():
        bad = [k for k in ("cells_change_opposite_to_imposed", "cells_change_beyond_imposed",
                           "cells_change_not_equal_to_imposed", "cells_phase_change_beyond_energy",
                           "cells_made_inconsistent") if getattr(inv, k)]
        text = (f"water change {inv.water_change_region_kg:.3g} kg (relative {inv.water_change_relative:.3g})"
                + (f", energy budget error <= {inv.max_energy_budget_rel_error:.2g} (relative)"
                   if inv.max_energy_budget_rel_error is not None else ""))
        lines.append(f"invariants on {inv.cells_checked} changed layer-cells: "
                     + ("; ".join(f"{k} {getattr(inv, k)}" for k in bad) + "; " if bad else "sign and size as imposed; ")
                     + text)
    shift = led.input_phase_disequilibrium
    if shift is not None and shift.cells:
        cells = ", ".join(str(c) for c in shift.cells_per_layer)
        fr = ", ".join(f"{v:.3g}" for v in shift.would_freeze_kg_per_layer)
        me = ", ".join(f"{v:.3g}" for v in shift.would_melt_kg_per_layer)
        lines.append(f"input off the freezing curve ({'re-balanced' if shift.acted_on else 'reported, not acted on'}): "
                     f"cells per layer [{cells}]; the equilibrium rule would freeze [{fr}] kg and melt [{me}] kg")
    elif led.cells_not_in_phase_equilibrium_before:
        lines.append(f"note: {led.cells_not_in_phase_equilibrium_before} region layer-cells were not in phase "
                     "equilibrium before the change (left as they were outside the region)")
    for key, said in led.notes.items():  # what was inferred or guessed: printed, not only stored
        lines.append(f"inferred ({key}): {said}")
    return "\n".join(lines)


__all__ = ["ledger_text"]
