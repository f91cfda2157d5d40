"""Ensembles: many perturbed starts from one recipe.

A recipe's ``members`` section (see :func:`initgen.config.members.expand_members`) defines members that
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
from pathlib import Path

from initgen.config.recipe import Document
from initgen.errors import InputError
from initgen.io.atomic import clean_stale_files, sha256_file
from initgen.io.targets import need_folder, writable_folder
from initgen.outputs import provenance as prov
from initgen.outputs.manifest import EnsembleResult, _manifest, write_manifest
from initgen.outputs.members import (STOP_NAME, Member, Task, _init_worker, _result, _run_in_worker, build_shared,
                                     output_path, run_task, select)


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
                                 "(several inputs) or {member} to the template", key="members.output_template")
            if os.path.realpath(out) in in_real:
                raise InputError(f"recipe key members.output_template: output {out} is an input file; initgen never "
                                 "modifies its input", key="members.output_template")
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
    need_folder(outdir, str(outdir), "an ensemble writes into a folder (--output DIR)")
    writable_folder(outdir if outdir.is_dir() else outdir.parent, f"--output {outdir}")
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


class Interrupted(KeyboardInterrupt):
    """An ensemble stopped by a signal: finished members are kept and listed in the manifest."""

    def __init__(self, signame: str, done: int, total: int, outdir: Path):
        super().__init__(signame)
        self.signame, self.done, self.total, self.outdir = signame, done, total, Path(outdir)

    def line(self) -> str:
        return (f"interrupted ({self.signame}): {self.done} of {self.total} member output(s) done and listed as 'ok' "
                f"in {self.outdir / 'manifest.json'}; unfinished members left no files; run the same command with "
                f"--resume to write the other {self.total - self.done}")


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
    those left, see :func:`initgen.io.atomic.clean_stale_files`)."""

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
