"""The public Python API. The command line (cli.py) is a thin layer over these functions."""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import plan as plan_mod
from . import provenance as prov
from .errors import InputError
from .grid import ModelFile, open_model
from .recipe import Document, inline_layout, load_layout, load_recipe
from .restart import NetCDFStore, XarrayStore, copy_and_patch, sha256_file, write_atomic_text


def _recipe(recipe) -> Document:
    if isinstance(recipe, Document):
        return recipe
    return load_recipe(recipe)


def _layout(layout, recipe: Document) -> Document | None:
    if layout is None:
        return inline_layout(recipe)
    if isinstance(layout, Document):
        return layout
    return load_layout(layout)


def _model(store, layout, recipe) -> ModelFile:
    model = open_model(store, layout, needed=plan_mod.needed_roles(recipe))
    model.layout = layout
    return model


@dataclass
class CheckResult:
    recipe: Document
    layout: Document | None
    model: ModelFile | None
    plan: Any | None

    def summary(self) -> str:
        lines = [f"recipe '{self.recipe.name}' is valid", f"recipe sha256: {self.recipe.sha256}"]
        if self.layout is not None:
            lines.append(f"layout '{self.layout.name}' sha256: {self.layout.sha256}")
        if self.model is not None:
            g = self.model.grid
            lines.append(f"grid: {g.kind} {'x'.join(map(str, g.shape))} ({g.extent()}); roles from {self.model.source}")
            lines.append("roles: " + ", ".join(f"{k}={'+'.join(r.variables)}" for k, r in sorted(self.model.roles.items())))
            if self.model.layers is not None:
                lines.append("soil layer nodes (m): " + ", ".join(f"{z:.3g}" for z in self.model.layers.node_m))
        if self.plan is not None:
            for b in self.plan.blocks:
                n = int((b.weight > 0).sum())
                lines.append(f"perturbation '{b.name}': {n} cell(s) with weight > 0, {int((b.weight >= 1).sum())} at full weight")
        return "\n".join(lines)


def check(recipe, layout=None, input=None, *, allow_outside_paths: bool = False) -> CheckResult:
    """Validate a recipe (and layout, and their fit to an input file). Writes nothing."""
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    if input is None:
        return CheckResult(rec, lay, None, None)
    store = NetCDFStore(input)
    try:
        model = _model(store, lay, rec)
        plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
        return CheckResult(rec, lay, model, plan)
    finally:
        store.close()


def preview(recipe, input, layout=None, *, allow_outside_paths: bool = False) -> dict:
    """Compute everything ``apply`` would and return the ledger; writes nothing."""
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    store = NetCDFStore(input)
    try:
        model = _model(store, lay, rec)
        plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
        return plan_mod.run(plan, store, write=False)
    finally:
        store.close()


def apply(recipe, input, output, layout=None, *, force: bool = False, allow_outside_paths: bool = False,
          progress=None) -> dict:
    """Write a perturbed copy of ``input`` to ``output`` and its provenance record beside it.

    Returns the provenance record (a dict). The input is never modified; on any error no
    output (and no provenance record) is left behind.
    """
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    input = Path(input)
    output = Path(output)
    started = prov.utc_now()
    # validate everything against the input, read-only, before a byte is written
    store = NetCDFStore(input)
    try:
        model = _model(store, lay, rec)
        plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
    finally:
        store.close()
    input_sha = sha256_file(input)
    history = prov.history_line(rec, started)
    holder: dict = {}

    def patch(out_store):
        model = _model(out_store, lay, rec)
        plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
        holder["ledger"] = plan_mod.run(plan, out_store, write=True, progress=progress)

    def after(tmp: Path):
        out_sha = sha256_file(tmp)
        holder["record"] = prov.record(
            recipe=rec, layout=lay, input_path=input, input_sha256=input_sha, output_path=output,
            output_sha256=out_sha, started=started, ended=prov.utc_now(), ledger=holder["ledger"],
            history=history, allow_outside=allow_outside_paths)
        write_atomic_text(prov.provenance_path(output), prov.dumps(holder["record"]))

    try:
        copy_and_patch(input, output, patch, force=force, history=history, after=after)
    except BaseException:
        if "record" in holder and not output.exists():
            with contextlib.suppress(OSError):
                prov.provenance_path(output).unlink()
        raise
    return holder["record"]


def perturb(dataset, recipe, layout=None, *, allow_outside_paths: bool = False):
    """In-memory version for notebooks: returns ``(new_dataset, ledger)``; the input is untouched."""
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    ds = dataset.copy(deep=True)
    store = XarrayStore(ds)
    model = _model(store, lay, rec)
    plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
    led = plan_mod.run(plan, store, write=True)
    ds.attrs["history"] = prov.history_line(rec, prov.utc_now()) + (
        "\n" + dataset.attrs["history"] if dataset.attrs.get("history") else "")
    return ds, led


def weights(recipe, input, layout=None, *, allow_outside_paths: bool = False):
    """The combined horizontal weight field max_i w_i(x) and the grid, for maps and mask files."""
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    store = NetCDFStore(input)
    try:
        model = _model(store, lay, rec)
        plan = plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths)
        w = np.max([b.weight for b in plan.blocks], axis=0)
        return w, model.grid, plan
    finally:
        store.close()


def ledger_text(ledger: dict) -> str:
    """A compact plain-text table of a ledger (what the terminal shows)."""
    lines = []
    reg = ledger["region"]
    lines.append(f"region: {reg['cells_weight_above_0']} cells with weight > 0 "
                 f"({reg['cells_full_weight']} at full weight), area {reg['area_m2'] / 1e6:,.0f} km2")
    for name, var in ledger["variables"].items():
        lines.append(f"{name} ({var['role']}, change in {var['units']}):")
        rows = var.get("layers") or [var.get("field")]
        lines.append(f"  {'layer':>5} {'depth_m':>8} {'changed':>8} {'area_mean':>10} {'min':>9} {'max':>9}")
        for r in rows:
            depth = r.get("node_depth_m")
            dtext = f"{depth:8.3f}" if depth is not None else f"{'-':>8}"
            fmt = (lambda v: f"{v:9.4g}" if v is not None else f"{'-':>9}")
            am = r["area_weighted_mean"]
            lines.append(f"  {r['layer']:>5} {dtext} {r['cells_changed']:>8} "
                         f"{(f'{am:10.4g}' if am is not None else '-'.rjust(10))} {fmt(r['min'])} {fmt(r['max'])}")
    if ledger.get("clamps"):
        lines.append("clamps: " + ", ".join(f"{k} {v}" for k, v in ledger["clamps"].items()))
    else:
        lines.append("clamps: none")
    phys = ledger.get("physics", {})
    extra = [f"{k} {v:.4g}" for k, v in phys.items() if k.endswith("_total_J") or k.endswith("_total_kg")]
    lines.append(f"physics: mode {phys.get('mode')}" + (("; " + ", ".join(extra)) if extra else ""))
    if ledger.get("cells_not_in_phase_equilibrium_before"):
        lines.append(f"note: {ledger['cells_not_in_phase_equilibrium_before']} region layer-cells were not in phase "
                     "equilibrium before the change (left as they were outside the region)")
    return "\n".join(lines)


__all__ = ["check", "preview", "apply", "perturb", "weights", "ledger_text"]
