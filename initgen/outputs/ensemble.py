"""Ensembles: many perturbed starts from one recipe.

A recipe's ``members`` section (see :func:`initgen.config.recipe.expand_members`) defines members that
differ only in how the shared anomaly is used: the change applied for a member is ::

    dT(z, x) = w(x) * f(z) * (sign * scale * A(x) + offset_K + noise(x))

``w``, ``f`` and ``A`` are computed once per input grid (in the calling process) and shared with
every member; ``noise`` is spatially correlated Gaussian noise (:func:`initgen.science.sources.correlated_noise`
on the model grid, Gaussian correlation in great-circle distance) drawn from the member's seed
``sources.member_seed(recipe seed, member name)``, so a member is reproducible from the recipe alone.
Each output gets its own provenance record (``member`` holds the name, parameters and seed).

:func:`run` writes every member for every input into one folder, named by the template
``members.output_template`` (default ``{member}/{input_stem}.nc``), on local worker processes or
on an existing Dask distributed cluster, and writes ``manifest.json`` and ``manifest.csv``. A
failing member is reported in the manifest and does not stop the others.

Parallel design (measured with ``tests/perf/bench_ensemble.py``): the shared arrays (weights,
anomaly, layer factors) travel to each local worker once, through the pool's initializer, rather
than being rebuilt by every worker from the recipe; see the benchmark for the numbers. Workers
need only picklable arguments (paths, the validated recipe and layout documents, member
parameters), so the code is safe under the ``spawn`` and ``forkserver`` start methods; on a Dask
cluster the workers must see the same file system as the client.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import multiprocessing
import os
import signal
import sys
import threading
import time
import traceback
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from initgen._version import __version__
from initgen.config.recipe import Document, expand_members
from initgen.engine import plan as plan_mod
from initgen.errors import InputError
from initgen.io.grid import open_model
from initgen.io.restart import NetCDFStore, clean_stale_files, sha256_file, write_atomic_text
from initgen.outputs import provenance as prov
from initgen.science import sources

MANIFEST_FORMAT = "initgen-ensemble-manifest/1"


# ---------------------------------------------------------------------------------------------
# Members
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Member:
    name: str
    scale: float
    sign: int
    offset_K: float
    seed: int
    noise: dict | None  # {"sigma_K": ..., "length_km": ...}

    @property
    def factor(self) -> float:
        """The factor on the anomaly A(x): sign * scale."""
        return self.sign * self.scale

    def record(self) -> dict:
        """What the provenance record and the manifest say about the member."""
        return {"name": self.name, "scale": self.scale, "sign": self.sign, "offset_K": self.offset_K,
                "seed": self.seed, "noise": None if self.noise is None else dict(self.noise)}


def members(recipe: Document) -> list[Member]:
    """The recipe's members, in recipe order ([] if it has no members section)."""
    data = recipe.data
    noise = (data.get("members") or {}).get("noise")
    return [Member(m["name"], float(m["scale"]), int(m["sign"]), float(m["offset_K"]),
                   sources.member_seed(int(data["seed"]), m["name"]), None if noise is None else dict(noise))
            for m in expand_members(data)]


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
    if member.noise is None or member.noise["sigma_K"] == 0:
        return None
    region = plan.region
    out = np.zeros(region.shape)
    out[region] = sources.correlated_noise(plan.lon[region], plan.lat[region], member.noise["sigma_K"],
                                           member.noise["length_km"], member.seed)
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
    template = recipe.data["members"]["output_template"]
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
        model.layout = layout
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
    model.layout = layout
    if tuple(model.grid.shape) != shared.shape:
        raise InputError(f"{store.describe()}: grid shape {model.grid.shape} differs from the shared plan's "
                         f"{shared.shape}")
    p = plan_mod.Plan(recipe, model, shared.blocks, dict(recipe.data["physics"]), shared.region, shared.window)
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


def ledger_summary(ledger: dict) -> dict:
    """The manifest's short summary of a ledger: top soil layer change, phase change, clamps."""
    top = None
    for var in ledger.get("variables", {}).values():
        if var["role"] == "soil_temperature":
            row = (var.get("layers") or [var.get("field")])[0]
            top = row.get("area_weighted_mean") if row else None
            break
    phys = ledger.get("physics", {})
    return {
        "top_soil_temperature_change_area_mean_K": top,
        "frozen_kg": phys.get("frozen_region_total_kg"),
        "melted_kg": phys.get("melted_region_total_kg"),
        "latent_J": phys.get("latent_region_total_J"),
        "sensible_J": phys.get("sensible_region_total_J"),
        "clamped_cells": int(sum(ledger.get("clamps", {}).values())),
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
# The ensemble
# ---------------------------------------------------------------------------------------------


@dataclass
class EnsembleResult:
    manifest: dict
    outdir: Path
    results: list = field(default_factory=list)

    @property
    def failed(self) -> list:
        return [r for r in self.results if r["status"] != "ok"]

    @property
    def exit_code(self) -> int:
        """0 all written; 2 every failure was bad input (of that member); 1 otherwise."""
        bad = self.failed
        if not bad:
            return 0
        return 2 if all(r["exit_code"] == 2 for r in bad) else 1


def default_workers() -> int:
    return max(1, min(2, os.cpu_count() or 1))


def plan_tasks(recipe: Document, inputs, outdir: Path, chosen: list[Member], *, force: bool,
               resume: bool = False) -> list[Task]:
    """One task per (input, member), with output paths checked before anything is written.

    An existing output is refused unless ``force`` (replace it) or ``resume`` (decided later by
    :func:`resume_tasks`, once the inputs' hashes are known).
    """
    inputs = [Path(i) for i in inputs]
    if not inputs:
        raise InputError("--input: give at least one input file")
    seen_inputs = {}
    for p in inputs:
        if not p.is_file():
            raise InputError(f"{p}: input file not found; check the path")
        key = os.path.realpath(p)
        if key in seen_inputs:
            raise InputError(f"{p}: given twice in --input")
        seen_inputs[key] = p
    tasks, where = [], {}
    in_real = set(seen_inputs)
    for inp in inputs:
        for m in chosen:
            out = output_path(recipe, outdir, m, inp).resolve()
            if str(out) in where:
                raise InputError(f"recipe key members.output_template: gives the same output {out} for "
                                 f"{where[str(out)]} and for member {m.name} of {inp}; add {{input_stem}} "
                                 "(several inputs) or {member} to the template")
            if os.path.realpath(out) in in_real:
                raise InputError(f"recipe key members.output_template: output {out} is an input file; initgen never "
                                 "modifies its input")
            if out.exists() and not (force or resume):
                raise InputError(f"{out}: exists; pass --resume to keep the finished members and write the rest, "
                                 "or --force to replace the ensemble's outputs")
            where[str(out)] = f"member {m.name} of {inp}"
            tasks.append(Task(len(tasks), m, str(inp.resolve()), "", str(out), ""))
    return tasks


def check_output_folder(outdir: Path, *, force: bool = False, resume: bool = False) -> None:
    """The ensemble's folder: refused when it is a file, when its parent is missing or it cannot be
    written, and when it already holds an ensemble (a manifest) unless ``resume`` or ``force``."""
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise InputError(f"{outdir}: exists and is not a folder; an ensemble writes into a folder (--output DIR)")
    target = outdir if outdir.is_dir() else outdir.parent if str(outdir.parent) else Path(".")
    if not target.is_dir():
        raise InputError(f"--output {outdir}: the folder {target} does not exist; create it first")
    if not os.access(target, os.W_OK | os.X_OK):
        raise InputError(f"--output {outdir}: the folder {target} is not writable; choose another folder")
    if outdir.is_dir() and (outdir / "manifest.json").exists() and not (force or resume):
        raise InputError(f"--output {outdir}: holds an ensemble already (manifest.json); pass --resume to keep its "
                         "finished members and write the rest, or --force to replace them")


def existing_output(task: Task, recipe: Document, layout: Document | None) -> tuple[str, object]:
    """What is at a task's output path: ("missing", None); ("match", result) when the output and its
    record exist, the record is of this member, recipe, layout and input, and the output's sha256
    is the recorded one; ("stale", why) when this member's output is there but does not match its
    record (or has none); ("foreign", why) when it is another experiment's file."""
    out = Path(task.output)
    if not out.exists():
        return "missing", None
    try:
        rec = json.loads(prov.provenance_path(out).read_text(encoding="utf-8"))
        rec_recipe, rec_layout = rec["recipe"]["sha256"], (rec.get("layout") or {}).get("sha256")
        rec_member, rec_in, rec_out = rec.get("member"), rec["input"]["sha256"], rec["output"]["sha256"]
    except FileNotFoundError:
        return "stale", "has no provenance record beside it"
    except (OSError, ValueError, KeyError, TypeError):
        return "stale", "has no readable provenance record beside it"
    if rec_recipe != recipe.sha256 or rec_layout != (None if layout is None else layout.sha256):
        return "foreign", "was written by another recipe or layout (its record's sha256 differs)"
    if rec_in != task.input_sha256:
        return "foreign", "was made from another input file (its record's input sha256 differs)"
    if json.loads(json.dumps(rec_member)) != json.loads(json.dumps(task.member.record())):
        return "foreign", f"is not member {task.member.name} as the recipe now defines it"
    if sha256_file(out) != rec_out:
        return "stale", "does not match the sha256 in its record"
    return "match", _result(task, "ok", output_sha256=rec_out, ledger=rec.get("ledger"),
                            message="kept: written by an earlier run and matches its record")


def resume_tasks(tasks: list[Task], recipe: Document, layout: Document | None) -> dict:
    """For ``--resume``: the results of members already done (output and record match), by task
    index; members whose output is there but does not match its record are marked to be written
    again. Another experiment's file at an output path is refused (``--force`` replaces it)."""
    kept = {}
    for t in tasks:
        state, what = existing_output(t, recipe, layout)
        if state == "match":
            kept[t.index] = what
        elif state == "stale":
            t.replace = True
        elif state == "foreign":
            raise InputError(f"{t.output}: exists and {what}; --resume keeps only this ensemble's own members; "
                             "pass --force to replace it")
    return kept


class Stopped(Exception):
    """A member stopped before writing because its ensemble was interrupted (nothing left behind)."""


class Interrupted(KeyboardInterrupt):
    """An ensemble stopped by a signal: finished members are kept and listed in the manifest."""

    def __init__(self, signame: str, done: int, total: int, outdir: Path):
        super().__init__(signame)
        self.signame, self.done, self.total, self.outdir = signame, done, total, Path(outdir)

    def line(self) -> str:
        return (f"interrupted ({self.signame}): {self.done} of {self.total} member output(s) done and listed as 'ok' "
                f"in {self.outdir / 'manifest.json'}; unfinished members left no files; run the same command with "
                f"--resume to write the other {self.total - self.done}")


STOP_NAME = ".initgen-stop"
CONNECT_TIMEOUT_S = 30  # how long to try to reach a Dask scheduler before refusing
_SIGNALS = tuple(s for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None)) if s is not None)


def _raise_on_signals():
    """SIGINT, SIGTERM and SIGHUP raise KeyboardInterrupt(signal name) in the main thread; returns
    the previous handlers (None when not in the main thread, where handlers cannot be set)."""

    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum, frame):
        raise KeyboardInterrupt(signal.Signals(signum).name)

    return {s: signal.signal(s, handler) for s in _SIGNALS}


class _Book:
    """The ensemble's results so far; the manifest is rewritten (atomically) after each one, so it
    is true at every moment: 'ok' rows are outputs on disk, the rest say why they are not."""

    def __init__(self, recipe, layout, outdir, tasks, started, workers, scheduler, progress, kept):
        self.recipe, self.layout, self.outdir, self.tasks = recipe, layout, Path(outdir), tasks
        self.started, self.workers, self.scheduler, self.progress = started, workers, scheduler, progress
        self.results: dict = dict(kept)
        self.status, self.pending = "pending", "queued or being written when this manifest was written"

    def add(self, task: Task, result: dict) -> None:
        self.results[task.index] = result
        self.write()
        if self.progress:
            self.progress(len(self.results), len(self.tasks),
                          sum(1 for r in self.results.values() if r["status"] != "ok"))

    def ordered(self) -> list:
        return [self.results.get(t.index) or _result(t, self.status, code=1, message=self.pending) for t in self.tasks]

    def write(self) -> dict:
        manifest = _manifest(self.recipe, self.layout, self.outdir, self.ordered(), self.started, self.workers,
                             self.scheduler)
        write_manifest(self.outdir, manifest)
        return manifest

    def reconcile(self) -> None:
        """After an interruption: a member whose output and record were published before its
        result came back (the signal arrived in between) is listed 'ok' too."""
        for t in self.tasks:
            r = self.results.get(t.index)
            if r is None or r["status"] in ("not run", "pending"):
                state, what = existing_output(t, self.recipe, self.layout)
                if state == "match":
                    what["message"] = "finished as the run was interrupted; matches its record"
                    self.results[t.index] = what
                elif r is None:
                    self.results[t.index] = _result(t, "not run", code=130, message=self.pending)


def _remove_empty_folders(book: _Book, outdir: Path) -> None:
    """Member folders that a failed or unfinished member created and left empty."""
    top = Path(outdir).resolve()
    for t in book.tasks:
        r = book.results.get(t.index)
        if r is not None and r["status"] == "ok":
            continue
        folder = Path(t.output).parent
        while folder != top and top in folder.parents:
            try:
                folder.rmdir()  # only when empty
            except OSError:
                break
            folder = folder.parent


def run(recipe, inputs, outdir, layout=None, *, names=None, workers: int | None = None,
        scheduler: str | None = None, force: bool = False, resume: bool = False, allow_outside_paths: bool = False,
        progress=None, share: str = "arrays", method: str | None = None) -> EnsembleResult:
    """Write every selected member for every input into ``outdir``, with a manifest.

    ``recipe``/``layout`` are validated Documents. ``names`` selects members by name (all when
    None). ``workers`` local processes (1 = in this process, one after the other; default
    :func:`default_workers`), or ``scheduler`` the address of a Dask distributed scheduler.
    ``progress(done, total, failed)`` is called as members finish. ``share`` is "arrays" (send
    the precomputed shared arrays to the workers) or "rebuild" (each worker computes them once);
    ``method`` the multiprocessing start method of local workers (default :func:`start_method`).

    Bad recipes, inputs that do not fit it, output names that clash, existing outputs (without
    ``force`` or ``resume``), an unwritable folder and an unreachable scheduler raise InputError
    before anything is created. A member that fails while running is reported in the result and
    the manifest, and the others go on. ``resume`` keeps members whose output and record exist
    and match (see :func:`existing_output`) and writes the rest.

    The manifest is rewritten atomically after every member. SIGINT, SIGTERM or SIGHUP stop the
    workers (local processes get SIGTERM, which makes a member being written remove its temporary
    file and lock; Dask tasks stop at their next block through a stop file in ``outdir``), the
    manifest is brought up to date, and :class:`Interrupted` (a KeyboardInterrupt) is raised.
    """
    if share not in ("arrays", "rebuild"):
        raise ValueError(f"share: 'arrays' or 'rebuild', got {share!r}")
    outdir = Path(outdir)
    check_output_folder(outdir, force=force, resume=resume)
    chosen = select(recipe, names)
    tasks = plan_tasks(recipe, inputs, outdir, chosen, force=force, resume=resume)
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise InputError(f"--workers: must be at least 1, got {workers}")
    # validate each input against the recipe and compute the shared arrays, once per grid
    cache: dict = {}
    by_input: dict = {}
    for t in tasks:
        if t.input not in by_input:
            shared, key = build_shared(recipe, layout, Path(t.input), allow_outside=allow_outside_paths, cache=cache)
            by_input[t.input] = (key, sha256_file(t.input))
        t.grid, t.input_sha256 = by_input[t.input]
    kept = resume_tasks(tasks, recipe, layout) if resume and not force else {}
    client = _connect(scheduler) if scheduler else None  # an unreachable scheduler creates nothing
    try:
        try:
            outdir.mkdir(exist_ok=True)
        except OSError as exc:
            raise InputError(f"--output {outdir}: cannot create the output folder ({exc.strerror or exc})") from None
        with contextlib.suppress(OSError):
            (outdir / STOP_NAME).unlink()  # left by an earlier run that was killed
        payload = cache if share == "arrays" else None
        command_line = list(sys.argv)
        book = _Book(recipe, layout, outdir, tasks, prov.utc_now(), workers, scheduler, progress, kept)
        book.write()
        todo = [t for t in tasks if t.index not in kept]
        old = _raise_on_signals()
        try:
            if client is not None:
                _run_dask(client, recipe, layout, todo, payload, force, allow_outside_paths, command_line, book,
                          outdir)
            elif workers == 1 or len(todo) <= 1:
                for t in todo:
                    book.add(t, run_task(recipe, layout, t, None if payload is None else payload[t.grid],
                                         force=force, allow_outside=allow_outside_paths, command_line=command_line))
            else:
                _run_local(start_method(method), min(workers, len(todo)), recipe, layout, todo, payload, force,
                           allow_outside_paths, command_line, book)
        except KeyboardInterrupt as exc:
            if old is not None:  # a second signal while cleaning up must not cut the clean-up short
                for s in _SIGNALS:
                    signal.signal(s, signal.SIG_IGN)
            for t in tasks:  # a worker stopped the hard way: its temporaries and lock (dead pids)
                clean_stale_files(Path(t.output))
            book.status, book.pending = "not run", "the run was interrupted before this member finished; run again with --resume"
            book.reconcile()
            _remove_empty_folders(book, outdir)
            manifest = book.write()
            name = str(exc) if str(exc).startswith("SIG") else "SIGINT"
            raise Interrupted(name, manifest["counts"]["ok"], len(tasks), outdir) from None
        finally:
            if old is not None:
                for s, h in old.items():
                    signal.signal(s, h)
        book.status, book.pending = "not run", "not run"
        _remove_empty_folders(book, outdir)
        manifest = book.write()
    finally:
        if client is not None:
            client.close()
    return EnsembleResult(manifest, outdir, book.ordered())


def start_method(requested: str | None = None) -> str:
    """The multiprocessing start method for local workers.

    Default: ``fork`` where the platform has it and this process runs no other thread (workers
    start in milliseconds and inherit the imported libraries; nothing is open in the parent
    while it forks), else ``forkserver``, else ``spawn``. The worker code is spawn-safe (it
    takes only picklable arguments), so any method gives the same output.
    """

    methods = multiprocessing.get_all_start_methods()
    if requested:
        if requested not in methods:
            raise InputError(f"start method {requested!r}: not available here; use one of {', '.join(methods)}")
        return requested
    if "fork" in methods and threading.active_count() == 1:
        return "fork"
    return "forkserver" if "forkserver" in methods else "spawn"


def _mp_context(method: str):
    ctx = multiprocessing.get_context(method)
    if method == "forkserver":
        ctx.set_forkserver_preload(["initgen.outputs.ensemble"])
    return ctx


def _run_local(method, nworkers, recipe, layout, tasks, payload, force, allow_outside, command_line, book):
    """Local worker processes.

    If a worker process dies (killed for memory, a crash in a library), every unfinished member
    of that pool fails with it; they are tried again in a fresh pool, and after a second death
    each remaining member runs in a process of its own, so only the member that kills its
    process is reported failed.
    """
    args = (recipe, layout)
    pending, breaks = list(tasks), 0
    while pending:
        if breaks < 2:
            pending = _pool_round(method, nworkers, args, pending, payload, force, allow_outside, command_line, book)
            breaks += bool(pending)
            continue
        for t in pending:  # isolation: one process per member
            if _pool_round(method, 1, args, [t], payload, force, allow_outside, command_line, book):
                book.add(t, _result(t, "failed", code=1, message="the worker process died while writing "
                                    "this member (out of memory? a crash in a library?)"))
        pending = []


def _stop_processes(procs, timeout: float = 30.0) -> None:
    """SIGTERM each worker (a member being written removes its temporary file and lock), wait for
    them, and SIGKILL any that did not end in ``timeout`` seconds (the caller then removes what
    those left, see :func:`initgen.io.restart.clean_stale_files`)."""

    for p in procs:
        with contextlib.suppress(Exception):
            if p.is_alive():
                p.terminate()
    deadline = time.monotonic() + timeout
    for p in procs:
        with contextlib.suppress(Exception):
            p.join(max(0.0, deadline - time.monotonic()))
    for p in procs:
        with contextlib.suppress(Exception):
            if p.is_alive():
                p.kill()
                p.join(5)


def _pool_round(method, nworkers, args, tasks, payload, force, allow_outside, command_line, book):
    """Run ``tasks`` on a pool; returns the tasks lost to a broken pool."""
    lost = []
    pool = ProcessPoolExecutor(max_workers=min(nworkers, len(tasks)), mp_context=_mp_context(method),
                               initializer=_init_worker, initargs=(payload,))
    try:
        futs = {pool.submit(_run_in_worker, *args, t, force, allow_outside, command_line): t for t in tasks}
        todo = set(futs)
        while todo:
            done, todo = wait(todo, return_when=FIRST_COMPLETED)
            for f in done:
                t = futs[f]
                try:
                    res = f.result()
                except BrokenProcessPool:
                    lost.append(t)
                    continue
                except Exception as exc:  # pickling problems and the like
                    res = _result(t, "failed", code=1, message=f"{exc.__class__.__name__}: {exc}",
                                  detail=traceback.format_exc())
                book.add(t, res)
    except BaseException:  # interrupted: start no queued member, stop the running ones cleanly
        procs = list((getattr(pool, "_processes", None) or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        _stop_processes(procs)
        raise
    pool.shutdown()
    return sorted(lost, key=lambda t: t.index)


def _connect(address: str):
    try:
        from distributed import Client  # optional (the dask extra), heavy: only for --scheduler
    except ImportError:
        raise InputError("--scheduler needs Dask distributed; install it with: pip install 'initgen[dask]'") from None
    try:
        return Client(address, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"--scheduler {address}: cannot connect to the Dask scheduler ({exc}); check the "
                         "address (tcp://host:port) and that the scheduler is running; nothing was written") from None


def _run_dask(client, recipe, layout, tasks, payload, force, allow_outside, command_line, book, outdir):
    from distributed import as_completed  # optional (the dask extra), heavy: only for --scheduler
    from distributed import wait as dask_wait

    shared_f = {}
    if payload is not None:
        for key, shared in payload.items():
            shared_f[key] = client.scatter(shared, broadcast=True, hash=False)
    futs = {}
    for t in tasks:
        f = client.submit(run_task, recipe, layout, t, shared_f.get(t.grid), force=force,
                          allow_outside=allow_outside, command_line=command_line, outdir=str(outdir), pure=False,
                          key=f"initgen-{t.index}-{t.member.name}-{os.getpid()}-{id(tasks)}")
        futs[f] = t
    try:
        with client.as_current():
            for f in as_completed(list(futs)):
                t = futs[f]
                try:
                    res = f.result()
                except Exception as exc:  # a worker lost, KilledWorker, ...
                    res = _result(t, "failed", code=1, message=f"{exc.__class__.__name__}: {exc}")
                book.add(t, res)
    except BaseException:
        # interrupted: queued tasks return at once and running ones stop at their next block (each
        # removes its temporary file) once the stop file exists; wait for them, then remove it
        stop = Path(outdir) / STOP_NAME
        try:
            stop.touch()
            with contextlib.suppress(Exception), client.as_current():
                dask_wait(list(futs), timeout=60)
            for f, t in futs.items():
                if t.index not in book.results and f.status == "finished":
                    with contextlib.suppress(Exception):
                        res = f.result(timeout=1)
                        if res["status"] == "ok":
                            book.results[t.index] = res
        finally:
            with contextlib.suppress(OSError):
                stop.unlink()
        raise


# ---------------------------------------------------------------------------------------------
# The manifest
# ---------------------------------------------------------------------------------------------

CSV_COLUMNS = ("member", "scale", "sign", "offset_K", "noise_sigma_K", "noise_length_km", "seed", "input",
               "input_sha256", "output", "output_sha256", "status", "message",
               "top_soil_temperature_change_area_mean_K", "frozen_kg", "melted_kg", "latent_J", "sensible_J",
               "clamped_cells")


def _manifest(recipe, layout, outdir, results, started, workers, scheduler) -> dict:
    outputs = []
    for r in results:
        row = dict(r)
        row.pop("index", None)
        try:
            row["output_relative"] = str(Path(r["output"]).resolve().relative_to(outdir.resolve()))
        except ValueError:
            row["output_relative"] = None
        if not row["detail"]:
            row.pop("detail")
        outputs.append(row)
    return {
        "format": MANIFEST_FORMAT,
        "initgen_version": __version__,
        "recipe": {"name": recipe.name, "path": str(recipe.path) if recipe.path else None, "sha256": recipe.sha256,
                   "seed": recipe.data["seed"]},
        "layout": None if layout is None else {"name": layout.name, "sha256": layout.sha256},
        "output_folder": str(outdir.resolve()),
        "started_utc": started,
        "ended_utc": prov.utc_now(),
        "execution": {"scheduler": scheduler} if scheduler else {"workers": workers},
        "counts": {"outputs": len(results), "ok": sum(r["status"] == "ok" for r in results),
                   "failed": sum(r["status"] == "failed" for r in results),
                   "not_run": sum(r["status"] == "not run" for r in results),
                   "pending": sum(r["status"] == "pending" for r in results)},
        "outputs": outputs,
    }


def manifest_csv(manifest: dict) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in manifest["outputs"]:
        m, s = r["member"], r["summary"] or {}
        noise = m["noise"] or {}
        vals = {"member": m["name"], "scale": m["scale"], "sign": m["sign"], "offset_K": m["offset_K"],
                "noise_sigma_K": noise.get("sigma_K"), "noise_length_km": noise.get("length_km"), "seed": m["seed"],
                "input": r["input"], "input_sha256": r["input_sha256"], "output": r["output"],
                "output_sha256": r["output_sha256"], "status": r["status"], "message": r["message"], **s}
        w.writerow(["" if vals.get(c) is None else vals.get(c) for c in CSV_COLUMNS])
    return buf.getvalue()


def write_manifest(outdir: Path, manifest: dict) -> None:
    write_atomic_text(Path(outdir) / "manifest.json", json.dumps(manifest, indent=2, allow_nan=False) + "\n")
    write_atomic_text(Path(outdir) / "manifest.csv", manifest_csv(manifest))


# ---------------------------------------------------------------------------------------------
# Dry run and text
# ---------------------------------------------------------------------------------------------


def preview(recipe, input_path, layout=None, *, names=None, allow_outside_paths: bool = False) -> list:
    """Each selected member's ledger for one input, without writing: [(Member, ledger), ...]."""
    chosen = select(recipe, names)
    store = NetCDFStore(input_path)
    try:
        model = open_model(store, layout, needed=plan_mod.needed_roles(recipe))
        model.layout = layout
        base = plan_mod.build_plan(recipe, model, allow_outside=allow_outside_paths)
        out = []
        for m in chosen:
            p = configure(plan_mod.Plan(recipe, model, base.blocks, dict(recipe.data["physics"]), base.region,
                                        base.window), m)
            out.append((m, plan_mod.run(p, store, write=False)))
        return out
    finally:
        store.close()


def _fmt(v, spec):
    return "-" if v is None else format(v, spec)


def members_table(rows) -> str:
    """One line per member: name, scale, sign, offset, top-layer mean change over region, frozen, melted, clamps."""
    lines = [f"{'member':<20} {'scale':>6} {'sign':>4} {'offset_K':>8} {'top_dT_K':>9} {'frozen_kg':>10} "
             f"{'melted_kg':>10} {'latent_J':>10} {'clamped':>7}"]
    for m, led in rows:
        s = ledger_summary(led)
        lines.append(f"{m.name:<20} {m.scale:>6.3g} {m.sign:>+4d} {m.offset_K:>8.3g} "
                     f"{_fmt(s['top_soil_temperature_change_area_mean_K'], '9.4g')} "
                     f"{_fmt(s['frozen_kg'], '10.4g')} {_fmt(s['melted_kg'], '10.4g')} {_fmt(s['latent_J'], '10.4g')} "
                     f"{s['clamped_cells']:>7d}")
    lines.append("(top_dT_K: mean over region of the top soil layer's change, area-weighted as in the ledger; "
                 "frozen, melted and latent: region totals; clamped: cells a limit changed)")
    return "\n".join(lines)


def results_table(result: EnsembleResult) -> str:
    """One line per output: member, input, status, mean top-layer change (or the failure)."""
    lines = [f"{'member':<20} {'input':<24} {'status':<7} {'top_dT_K':>9}  output / message"]
    for r in result.results:
        s = r["summary"] or {}
        tail = r["output"] if r["status"] == "ok" else r["message"]
        if r["status"] == "ok" and r["message"].startswith("kept"):
            tail += " (kept: written earlier, matches its record)"
        lines.append(f"{r['member']['name']:<20} {Path(r['input']).name:<24} {r['status']:<7} "
                     f"{_fmt(s.get('top_soil_temperature_change_area_mean_K'), '9.4g')}  {tail}")
    c = result.manifest["counts"]
    kept = sum(1 for r in result.results if r["status"] == "ok" and r["message"].startswith("kept"))
    lines.append(f"{c['ok']} of {c['outputs']} output(s) written" + (f" ({kept} kept from an earlier run)" if kept
                 else "") + f", {c['failed']} failed" + (f", {c['not_run']} not run" if c.get("not_run") else "")
                 + "; manifest: "
                 f"{result.outdir / 'manifest.json'} and manifest.csv")
    return "\n".join(lines)


__all__ = ["Member", "members", "select", "configure", "member_noise", "output_path", "build_shared", "run",
           "run_task", "preview", "members_table", "results_table", "ledger_summary", "write_manifest",
           "EnsembleResult", "default_workers"]
