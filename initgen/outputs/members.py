"""Ensemble members and their tasks: the members a recipe defines, output names, the arrays shared
once per input grid, and one task (one member of one input) as a worker runs it.

The change applied for a member is ::

    dT(z, x) = w(x) * f(z) * (sign * scale * A(x) + offset_K + noise(x))

(see :mod:`initgen.outputs.ensemble` for the whole design).
"""

from __future__ import annotations

import hashlib
import os
import signal
import traceback
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from initgen.config.members import expand_members
from initgen.config.recipe import Document
from initgen.config.views import Noise
from initgen.engine import plan as plan_mod
from initgen.engine.ledger_view import LedgerView
from initgen.errors import InputError
from initgen.io.grid import open_model
from initgen.io.stores import NetCDFStore
from initgen.outputs import provenance as prov
from initgen.science import sources


@dataclass(frozen=True)
class Member:
    name: str
    scale: float
    sign: int
    offset_K: float
    seed: int
    noise: Noise | None

    @property
    def factor(self) -> float:
        """The factor on the anomaly A(x): sign * scale."""
        return self.sign * self.scale

    def record(self) -> dict:
        """What the provenance record and the manifest say about the member."""
        return {"name": self.name, "scale": self.scale, "sign": self.sign, "offset_K": self.offset_K,
                "seed": self.seed, "noise": None if self.noise is None else self.noise.as_dict()}


def members(recipe: Document) -> list[Member]:
    """The recipe's members, in recipe order ([] if it has no members section)."""
    view = recipe.view
    noise = view.members.noise if view.members is not None else None
    return [Member(m.name, float(m.scale), int(m.sign), float(m.offset_K), sources.member_seed(int(view.seed), m.name),
                   noise) for m in expand_members(recipe.data)]


def select(recipe: Document, names=None) -> list[Member]:
    """The members named in ``names`` (all when None); an unknown name is an InputError."""
    allm = members(recipe)
    if not allm:
        raise InputError(f"recipe {recipe.name}: has no members section; add one (see `initgen schema`) "
                         "or run without --member")
    if names is None:
        return allm
    if isinstance(names, str):
        names = [names]
    by_name = {m.name: m for m in allm}
    out = []
    for n in names:
        if n not in by_name:
            raise InputError(f"--member {n}: the recipe has no member of that name; it has "
                             + ", ".join(by_name))
        out.append(by_name[n])
    return out


def member_noise(plan, member: Member) -> np.ndarray | None:
    """The member's noise field on the plan's window (K), computed where the region has weight > 0, else 0.

    The noise at a point does not depend on which other points are computed, so restricting the
    computation to the region changes nothing where it is used.
    """
    if member.noise is None or member.noise.sigma_K == 0:
        return None
    region = plan.region
    out = np.zeros(region.shape)
    out[region] = sources.correlated_noise(plan.lon[region], plan.lat[region], member.noise.sigma_K,
                                           member.noise.length_km, member.seed)
    return out


def configure(plan, member: Member | None):
    """Set the member's scale, offset and noise on a plan (in place; returns the plan)."""
    if member is None:
        return plan
    plan.member_scale = member.factor
    plan.member_offset_K = member.offset_K
    plan.noise = member_noise(plan, member)
    return plan


# ---------------------------------------------------------------------------------------------
# Output names
# ---------------------------------------------------------------------------------------------


def input_stem(path: Path) -> str:
    name = Path(path).name
    for ext in (".nc4", ".nc", ".cdf", ".netcdf"):
        if name.lower().endswith(ext):
            return name[: -len(ext)]
    return Path(name).stem


def output_path(recipe: Document, outdir: Path, member: Member, input_path: Path) -> Path:
    template = recipe.view.members.output_template
    rel = template.format(member=member.name, input_stem=input_stem(input_path), input_name=Path(input_path).name)
    return Path(outdir) / rel


# ---------------------------------------------------------------------------------------------
# Shared arrays, once per input grid
# ---------------------------------------------------------------------------------------------


@dataclass
class Shared:
    """The arrays every member of one input grid shares: the plan's blocks and region."""

    blocks: list
    region: np.ndarray
    shape: tuple
    window: tuple
    files: dict = field(default_factory=dict)  # files the recipe reads, with their sha256


def _grid_fingerprint(model, recipe: Document, layout: Document | None, allow_outside: bool) -> str:
    """sha256 of everything the shared arrays depend on: recipe, layout, and what comes from the file."""
    h = hashlib.sha256()
    h.update(f"{recipe.sha256} {None if layout is None else layout.sha256} {allow_outside}".encode())
    areas = model.grid.area_src if isinstance(model.grid.area_src, np.ndarray) else np.zeros(0)
    for arr in (model.grid.lon_src, model.grid.lat_src, areas):
        a = np.ascontiguousarray(arr, dtype=np.float64)
        h.update(str(a.shape).encode())
        h.update(a.tobytes())
    d0, n0 = model.grid.dims[0], model.grid.shape[0]
    rows = max(1, 4_000_000 // max(1, model.grid.size // max(1, n0)))  # bounded memory: ~32 MB a read
    for name in ("land_fraction", "land_mask", "surface_altitude"):
        role = model.role(name)
        if role is not None:
            h.update(name.encode())
            for start in range(0, n0, rows):
                a = role.read(model.store, {d0: slice(start, min(n0, start + rows))})
                h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
    if model.layers is not None:
        for arr in (model.layers.node_m, model.layers.top_m, model.layers.bottom_m):  # NaN: interfaces unknown
            h.update(np.ascontiguousarray(arr, dtype=np.float64).tobytes())
    return h.hexdigest()


def build_shared(recipe: Document, layout: Document | None, input_path: Path, *, allow_outside: bool = False,
                 cache: dict | None = None) -> tuple[Shared, str]:
    """Validate the recipe against ``input_path`` (read-only) and compute the shared arrays.

    With a ``cache`` dict, inputs on the same grid (same coordinates, land and elevation fields
    and layers) reuse one computation. Returns the arrays and the grid fingerprint.
    """
    store = NetCDFStore(input_path)
    try:
        model = open_model(store, layout, needed=plan_mod.needed_roles(recipe))
        key = _grid_fingerprint(model, recipe, layout, allow_outside)
        if cache is not None and key in cache:
            return cache[key], key
        p = plan_mod.build_plan(recipe, model, allow_outside=allow_outside)
        shared = Shared(p.blocks, p.region, tuple(model.grid.shape), p.window, p.files)
        if cache is not None:
            cache[key] = shared
        return shared, key
    finally:
        store.close()


def plan_on(recipe: Document, layout: Document | None, store, shared: Shared, member: Member | None):
    """A plan for ``store`` (the output copy) from shared arrays, configured for ``member``."""
    model = open_model(store, layout, needed=plan_mod.needed_roles(recipe))
    if tuple(model.grid.shape) != shared.shape:
        raise InputError(f"{store.describe()}: grid shape {model.grid.shape} differs from the shared plan's "
                         f"{shared.shape}")
    p = plan_mod.Plan(recipe, model, shared.blocks, recipe.view.physics, shared.region, shared.window)
    return configure(p, member)


# ---------------------------------------------------------------------------------------------
# One task: one member of one input
# ---------------------------------------------------------------------------------------------


@dataclass
class Task:
    index: int
    member: Member
    input: str
    input_sha256: str
    output: str
    grid: str  # fingerprint: which Shared this task uses
    replace: bool = False  # --resume: an output that does not match its record is written again


def ledger_summary(ledger) -> dict:
    """The manifest's short summary of a ledger (dict or ``LedgerView``): top soil layer change,
    phase change, clamps."""
    led = LedgerView.from_dict(ledger)
    soil = led.of_role("soil_temperature")
    top = soil[0].rows[0].area_weighted_mean if soil and soil[0].rows else None
    total = led.physics.region_total
    return {
        "top_soil_temperature_change_area_mean_K": top,
        "frozen_kg": total("frozen"),
        "melted_kg": total("melted"),
        "latent_J": total("latent"),
        "sensible_J": total("sensible"),
        "clamped_cells": int(sum(led.clamps.values())),
    }


def _result(task: Task, status: str, *, code: int = 0, message: str = "", output_sha256=None, ledger=None,
            detail: str = "") -> dict:
    return {"index": task.index, "member": task.member.record(), "input": task.input,
            "input_sha256": task.input_sha256, "output": task.output, "output_sha256": output_sha256,
            "status": status, "exit_code": code, "message": message, "detail": detail,
            "summary": None if ledger is None else ledger_summary(ledger)}


def run_task(recipe: Document, layout: Document | None, task: Task, shared: Shared | None, *, force: bool,
             allow_outside: bool, command_line: list | None = None, outdir: str | None = None) -> dict:
    """Write one member of one input; never raises for a failure of that member (returns it instead).

    With ``shared`` None the worker computes the shared arrays itself (once per process and grid).
    With ``outdir`` the member stops between blocks (removing its temporary file) as soon as the
    ensemble's stop file appears there (how an interrupted run stops Dask tasks already running).
    """
    stop = Path(outdir) / STOP_NAME if outdir else None

    def check_stop(done, total):
        if stop is not None and stop.exists():
            raise Stopped(f"member {task.member.name}: not written, the ensemble was interrupted")

    try:
        check_stop(0, 0)
        if shared is None:
            shared = _process_shared(recipe, layout, task, allow_outside)
        out = Path(task.output)
        try:
            out.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"{out}: cannot create the output folder {out.parent} ({exc.strerror or exc}); "
                             "check members.output_template and --output") from None

        def patch(out_store):
            check_stop(0, 0)
            return plan_mod.run(plan_on(recipe, layout, out_store, shared, task.member), out_store, write=True,
                                progress=check_stop if stop is not None else None)

        rec = prov.write_perturbed(recipe=recipe, layout=layout, input_path=Path(task.input), output_path=out,
                                   patch=patch, force=force or task.replace, allow_outside=allow_outside,
                                   member=task.member.record(), input_sha256=task.input_sha256,
                                   command_line=command_line, files=shared.files)
        return _result(task, "ok", output_sha256=rec["output"]["sha256"], ledger=rec["ledger"])
    except Stopped as exc:
        return _result(task, "not run", code=130, message=str(exc))
    except InputError as exc:
        return _result(task, "failed", code=2, message=" ".join(str(exc).split()))
    except Exception as exc:  # a bug or the machine: reported, the other members go on
        return _result(task, "failed", code=1, message=f"{exc.__class__.__name__}: {exc}",
                       detail=traceback.format_exc())


# per-process state of local workers: shared arrays by grid fingerprint
_WORKER_SHARED: dict = {}


def _process_shared(recipe, layout, task: Task, allow_outside: bool) -> Shared:
    if task.grid not in _WORKER_SHARED:
        _WORKER_SHARED[task.grid] = build_shared(recipe, layout, Path(task.input), allow_outside=allow_outside)[0]
    return _WORKER_SHARED[task.grid]


def _init_worker(shared_by_grid: dict | None) -> None:
    # Ctrl-C and a closing terminal reach the whole process group: the parent decides, and stops
    # the workers with SIGTERM (the writer turns it into a clean-up while a member is written)
    for sig in (signal.SIGINT, getattr(signal, "SIGHUP", None)):
        if sig is not None:
            signal.signal(sig, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    _WORKER_SHARED.clear()
    if shared_by_grid:
        _WORKER_SHARED.update(shared_by_grid)


def _run_in_worker(recipe, layout, task, force, allow_outside, command_line):
    try:
        return run_task(recipe, layout, task, _WORKER_SHARED.get(task.grid), force=force,
                        allow_outside=allow_outside, command_line=command_line)
    except KeyboardInterrupt:
        # a signal reached this worker while it wrote a member: the writer has removed the member's
        # temporary file and lock; end the process rather than take the next member from the queue
        os._exit(130)


# ---------------------------------------------------------------------------------------------


class Stopped(Exception):
    """A member stopped before writing because its ensemble was interrupted (nothing left behind)."""


STOP_NAME = ".initgen-stop"
