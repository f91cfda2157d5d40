"""The public Python API. The command line (cli.py) is a thin layer over these functions."""

from __future__ import annotations

import contextlib
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from initgen.config.recipe import Document, inline_layout, load_layout, load_recipe
from initgen.engine import plan as plan_mod
from initgen.engine.persistence import settings
from initgen.errors import InputError
from initgen.io.coding import storable_range
from initgen.io.grid import open_model
from initgen.io.model import ModelFile
from initgen.io.stores import NetCDFStore, XarrayStore
from initgen.outputs import collate as collate_mod
from initgen.outputs import ensemble, manifest
from initgen.outputs import members as members_mod
from initgen.outputs import provenance as prov
from initgen.outputs.ledger_text import ledger_text
from initgen.outputs.members import configure, select


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
    return open_model(store, layout, needed=plan_mod.needed_roles(recipe))


@dataclass
class Planned:
    """What :func:`open_plan` yields: the recipe and layout documents, the open input store, the
    model file, the plan (configured for the member, if any) and the member."""

    recipe: Document
    layout: Document | None
    store: Any
    model: ModelFile
    plan: Any
    member: Any


@contextlib.contextmanager
def open_plan(recipe, input, layout=None, *, member: str | None = None, allow_outside_paths: bool = False):
    """Open ``input`` read-only and plan ``recipe`` on it; the store is closed on leaving.

    The one open -> model -> plan -> close sequence of the API and the reports.

    Parameters
    ----------
    recipe : str, Path or Document
        The recipe.
    input : str or Path
        The model file.
    layout : str, Path, Document or None
        The layout (default: the recipe's inline layout, or CF attributes).
    member : str, optional
        A member of the recipe's members section (default: the recipe as written).
    allow_outside_paths : bool
        Let the recipe read files outside its own folder.

    Yields
    ------
    Planned

    Raises
    ------
    InputError
        Any bad input (the store is closed).

    Examples
    --------
    >>> with initgen.api.open_plan("recipe.yaml", "restart.nc") as p:  # doctest: +SKIP
    ...     print(p.plan.region.sum(), "cells")
    """
    rec = _recipe(recipe)
    lay = _layout(layout, rec)
    mem = _member(rec, member)
    store = NetCDFStore(input)
    try:
        model = _model(store, lay, rec)
        plan = configure(plan_mod.build_plan(rec, model, allow_outside=allow_outside_paths), mem)
        yield Planned(rec, lay, store, model, plan, mem)
    finally:
        store.close()


def layer_lines(layers) -> list:
    """One line per soil layer: top, bottom, thickness, node and where they came from (what
    ``check`` prints).

    Parameters
    ----------
    layers : initgen.science.layers.Layers or None
        The model file's soil layers (``model.layers``); None when no depths were found.

    Returns
    -------
    list of str
        A header and one line per layer, or one line saying which layout keys give depths.

    Examples
    --------
    >>> from initgen.science.layers import Layers
    >>> layer_lines(Layers.from_interfaces([0.0, 0.1, 0.3]))[1]
    '  layer 0: 0..0.1, 0.1, node 0.05; interfaces from interfaces; node at the layer middle'
    """
    if layers is None:
        return ["soil layers: no depths found (name roles.layer_interface_depth, layer_thickness or "
                "layer_node_depth in a layout)"]
    out = [f"soil layers ({layers.n}): top..bottom m, thickness m, node m; source"]
    for i in range(layers.n):
        t, b, z = layers.top_m[i], layers.bottom_m[i], layers.node_m[i]
        geom = (f"{t:.4g}..{b:.4g}, {b - t:.4g}" if np.isfinite(t) else "unknown..unknown, unknown")
        out.append(f"  layer {i}: {geom}, node {z:.4g}; {layers.source[i]}")
    return out


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
        if self.recipe.view.members is not None:
            names = [m.name for m in members_mod.members(self.recipe)]
            lines.append(f"members ({len(names)}): " + ", ".join(names))
        phys = self.recipe.view.physics
        if phys.active:
            rule = phys.phase_rule
            lines.append(f"physics: mode {phys.mode}, phase rule {rule} ("
                         + ("water changes phase only where the imposed change requires it"
                            if rule == "change_driven" else
                            "the liquid/ice split is put on the freezing curve, as a diagnosing model would") + ")")
            if self.model is not None:
                src = plan_mod.soil_parameter_sources(phys, self.model)
                lines.append("soil parameters: " + "; ".join(f"{k.replace('_', ' ')} {v}" for k, v in src.items()))
        if self.model is not None:
            g = self.model.grid
            size = " x ".join(f"{n} {d}" for n, d in zip(g.shape, g.dims))
            lines.append(f"grid: {g.kind}, {size} ({g.extent()}); roles from {self.model.source}")
            lines.append(f"cell area: {g.area_source}")
            lines.append("roles: " + ", ".join(f"{k}={'+'.join(r.variables)}" for k, r in sorted(self.model.roles.items())))
            srcs = getattr(self.model, "role_sources", {}) or {}
            for k in sorted(srcs):
                lines.append(f"  role {k}: from {srcs[k]}")
            if self.model.water is not None:
                lines.append(self.model.water.describe())
            if self.plan is not None:
                for target in self.plan.targets:
                    role = self.model.role(target)
                    for v in (role.views if role is not None else []):
                        rng = storable_range(v.info.attrs, v.info.dtype)
                        if rng is not None:
                            lines.append(f"{v.info.name}: stored as {np.dtype(v.info.dtype)}, holds {rng[0]:.6g}.."
                                         f"{rng[1]:.6g} {v.info.units}; a change beyond is refused (recipe key "
                                         "limits.packed_out_of_range)")
            lines.extend(layer_lines(self.model.layers))
        if self.plan is not None:
            for key, f in self.plan.files.items():
                lines.append(f"file {key}: {f['path']} (sha256 {f['sha256']})")
            for b in self.plan.blocks:
                if b.factors is not None:
                    lines.append(f"perturbation '{b.name}': depth factors f(z) per soil layer: "
                                 + ", ".join(f"{f:.3g}" for f in b.factors) + f"; at the surface {b.surface_factor:.3g}")
                n = int((b.weight > 0).sum())
                lines.append(f"perturbation '{b.name}': {n} cell(s) with weight > 0, {int((b.weight >= 1).sum())} at full weight")

            ps = settings(self.plan)
            lines.append("persistence estimate: " + (f"not estimated: {ps['reason']}" if ps["reason"] else
                                                     f"heat capacity from {ps['heat_capacity_source']}; conductivity "
                                                     f"from {ps['conductivity_source']}"))
        return "\n".join(lines)


def check(recipe, layout=None, input=None, *, allow_outside_paths: bool = False) -> CheckResult:
    """Validate a recipe (and layout, and their fit to an input file). Writes nothing.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    input : str or os.PathLike, optional
        A restart file to check the recipe against (opened read-only): grid, roles, layers and
        the whole plan are built, as ``apply`` would.
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).

    Returns
    -------
    CheckResult
        The loaded recipe and layout, and (with ``input``) the model file and the plan;
        ``summary()`` words them as ``initgen check`` prints them.

    Raises
    ------
    InputError
        Any bad input: the message names the file, variable or key (``exc.key``) and what to do.

    Examples
    --------
    >>> import initgen
    >>> print(initgen.check("recipe.yaml", input="restart.nc").summary())  # doctest: +SKIP
    """
    if input is None:
        rec = _recipe(recipe)
        return CheckResult(rec, _layout(layout, rec), None, None)
    with open_plan(recipe, input, layout, allow_outside_paths=allow_outside_paths) as p:
        return CheckResult(p.recipe, p.layout, p.model, p.plan)


def preview(recipe, input, layout=None, *, member: str | None = None, allow_outside_paths: bool = False) -> dict:
    """Compute everything ``apply`` would and return the ledger; writes nothing.

    ``member`` names one member of a recipe with members (without it: the recipe as written,
    scale 1 and no noise; :func:`preview_members` gives every member).

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    input : str or os.PathLike
        The restart file, opened read-only.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    member : str, optional
        One member of the recipe's ``members`` section.
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).

    Returns
    -------
    dict
        The ledger: what ``apply`` would change (counts, per-layer statistics, clamps, flags,
        energy and phase change), the same record the provenance keeps.

    Raises
    ------
    InputError
        Any bad input; nothing is written.

    Examples
    --------
    >>> import initgen
    >>> ledger = initgen.preview("recipe.yaml", "restart.nc")  # doctest: +SKIP
    >>> ledger["region"]["cells_weight_above_0"]  # doctest: +SKIP
    """

    with open_plan(recipe, input, layout, member=member, allow_outside_paths=allow_outside_paths) as p:
        return plan_mod.run(p.plan, p.store, write=False)


def apply(recipe, input, output, layout=None, *, member: str | None = None, force: bool = False,
          allow_outside_paths: bool = False, progress=None, repack: bool = False) -> dict:
    """Write a perturbed copy of ``input`` to ``output`` and its provenance record beside it.

    ``member`` names one member of a recipe with a members section (without it the recipe is
    applied as written: scale 1, no offset, no noise; :func:`apply_ensemble` writes every member).
    Returns the provenance record (a dict). The input is never modified; on any error no output
    (and no provenance record) is left behind.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    input : str or os.PathLike
        The restart file; never modified.
    output : str or os.PathLike
        The perturbed copy; ``<output>.provenance.json`` is written beside it.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    member : str, optional
        One member of the recipe's ``members`` section.
    force : bool
        Replace an existing output.
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).
    progress : callable, optional
        Called as ``progress(done, total)`` after each block.
    repack : bool
        Rewrite the output whole with the same encodings (smaller, slower; ``--repack``).

    Returns
    -------
    dict
        The provenance record (recipe, layout, hashes, versions, ledger, io section).

    Raises
    ------
    InputError
        Any bad input, raised before a byte of the output is written.

    Examples
    --------
    >>> import initgen
    >>> record = initgen.apply("recipe.yaml", "restart.nc", "restart.cold.nc")  # doctest: +SKIP
    >>> record["ledger"]["region"]  # doctest: +SKIP
    """

    input = Path(input)
    output = Path(output)
    # validate everything against the input, read-only, before a byte is written; the plan's
    # arrays depend only on the input, so the same plan then patches the copy
    with open_plan(recipe, input, layout, member=member, allow_outside_paths=allow_outside_paths) as p:
        plan = p.plan
        _refuse_unstorable_first(plan, p.store)

    def patch(out_store):
        return plan_mod.run(plan, out_store, write=True, progress=progress)

    return prov.write_perturbed(recipe=p.recipe, layout=p.layout, input_path=input, output_path=output, patch=patch,
                                force=force, allow_outside=allow_outside_paths,
                                member=None if p.member is None else p.member.record(), repack=repack,
                                files=plan.files)


def apply_tiles(recipe, inputs, outputs, layout=None, *, force: bool = False, allow_outside_paths: bool = False,
                progress=None, repack: bool = False, on_written=None) -> list:
    """Write the perturbed copies of a model stored as tiles, all of them or none.

    Every tile is first run read-only (:func:`preview`: the whole plan, every value check), so a
    tile the recipe cannot be applied to is refused before the first output is written. The
    tiles are then written one by one (:func:`apply`); if one fails or the run is interrupted,
    the outputs and provenance records this call already wrote are removed, so a tile set is
    never left half written.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        A recipe without a members section (with members, see :func:`apply_ensemble`).
    inputs : sequence of str or os.PathLike
        The tiles' restart files; never modified.
    outputs : sequence of str or os.PathLike
        One output per input, in the same order.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity (``grid_file`` may name each tile's grid file).
    force : bool
        Replace existing outputs. An output replaced before a later tile failed is removed too.
    allow_outside_paths : bool
        Let the recipe read files outside its own folder.
    progress : callable, optional
        Called as ``progress(done, total)`` after each block of each tile.
    repack : bool
        Rewrite each output whole with the same encodings.
    on_written : callable, optional
        Called as ``on_written(output, record)`` after each tile is written (e.g. to print it).

    Returns
    -------
    list of dict
        The provenance records, in the order of ``inputs``.

    Raises
    ------
    InputError
        A tile the recipe cannot be applied to (nothing written), or a failure while writing
        (what was written removed; the message says how many tiles that was).

    Examples
    --------
    >>> records = initgen.api.apply_tiles("r.yaml", ["t1.nc", "t2.nc"], ["o/t1.nc", "o/t2.nc"])  # doctest: +SKIP
    """
    inputs, outputs = [Path(i) for i in inputs], [Path(o) for o in outputs]
    if len(inputs) != len(outputs):
        raise InputError(f"--output: gives {len(outputs)} output(s) for {len(inputs)} input tile(s); give one per tile")
    pairs = list(zip(inputs, outputs))
    for inp, _ in pairs:  # every tile, the whole plan read-only, before one is written
        preview(recipe, inp, layout, allow_outside_paths=allow_outside_paths)
    records, written = [], []
    try:
        for inp, out in pairs:
            rec = apply(recipe, inp, out, layout, force=force, allow_outside_paths=allow_outside_paths,
                        progress=progress, repack=repack)
            written.append(out)
            records.append(rec)
            if on_written is not None:
                on_written(out, rec)
    except BaseException as exc:
        for out in written:
            for path in (out, prov.provenance_path(out)):
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
        if written and isinstance(exc, InputError):
            raise InputError(f"{exc} (the {len(written)} tile(s) written before it were removed: tiles are "
                             "written all together or not at all)", key=exc.key, variable=exc.variable,
                             file=exc.file) from None
        raise
    return records


def _refuse_unstorable_first(plan, store) -> None:
    """A target stored as integers (packed or not) or with valid limits may not hold the change:
    run the plan once read-only on the input so that a refusal comes before the copy is made.
    (With a donor the run would close the donor's file; the refusal then comes while patching
    the temporary copy, which is removed: no output either way.)"""

    if any(b.donor is not None for b in plan.blocks) or plan.recipe.view.limits.packed_out_of_range == "clip":
        return
    roles = [plan.model.role(t) for t in plan.targets] + [plan.model.role(r) for r in
                                                          ("soil_liquid", "soil_ice", "soil_water_total",
                                                           "soil_frozen_fraction", "soil_unfrozen_fraction",
                                                           "snow_depth")]
    if any(storable_range(v.info.attrs, v.info.dtype) is not None for r in roles if r is not None for v in r.views):
        with warnings.catch_warnings():  # the run that writes warns again
            warnings.simplefilter("ignore")
            plan_mod.run(plan, store, write=False)


def _member(rec: Document, member: str | None):
    if member is None:  # the recipe as written: scale 1, sign +1, no offset, no noise
        return None
    return select(rec, [member])[0]


def apply_ensemble(recipe, inputs, output_dir, layout=None, *, members=None, workers: int | None = None,
                   scheduler: str | None = None, force: bool = False, resume: bool = False,
                   allow_outside_paths: bool = False, progress=None):
    """Write every member (or those named in ``members``) for every input into ``output_dir``.

    Outputs are named by the recipe's ``members.output_template``; ``manifest.json`` and
    ``manifest.csv`` list them and are rewritten atomically after every member, so they are true
    at every moment. ``resume`` finishes an interrupted or partly failed ensemble: members whose
    output and provenance record exist and match are kept, the others are written.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    inputs : sequence of str or os.PathLike
        The restart files (start dates); never modified.
    output_dir : str or os.PathLike
        The ensemble's folder (created if its parent exists).
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    members : sequence of str, optional
        Only these members (default: every member of the recipe).
    workers : int, optional
        Local worker processes (default min(2, CPUs)); ignored with ``scheduler``.
    scheduler : str, optional
        Address of a Dask scheduler (the ``dask`` extra) to run the members on.
    force : bool
        Replace an existing ensemble in ``output_dir``.
    resume : bool
        Keep the members already written and matching their records; write the rest.
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).
    progress : callable, optional
        Called as ``progress(done, total, failed)`` after each member.

    Returns
    -------
    EnsembleResult
        ``manifest`` (the dict written as manifest.json), ``outdir``, ``results`` (one dict per
        member and input, with ``status``) and ``exit_code``: 0 when every member was written, 2
        when the failures were bad input, else 1.

    Raises
    ------
    InputError
        Bad input found before any member is written (recipe, layout, inputs, the folder).
    initgen.outputs.ensemble.Interrupted
        A signal (SIGINT, SIGTERM, SIGHUP) stopped the run: workers stopped, temporaries removed,
        finished members kept (a KeyboardInterrupt).

    Examples
    --------
    >>> res = initgen.api.apply_ensemble("pairs.yaml", ["start1.nc", "start2.nc"], "ens")  # doctest: +SKIP
    >>> res.exit_code, len(res.results)  # doctest: +SKIP
    """

    rec = _recipe(recipe)
    return ensemble.run(rec, [Path(i) for i in inputs], Path(output_dir), _layout(layout, rec), names=members,
                        workers=workers, scheduler=scheduler, force=force, resume=resume,
                        allow_outside_paths=allow_outside_paths, progress=progress)


def preview_members(recipe, input, layout=None, *, members=None, allow_outside_paths: bool = False) -> list:
    """The ledger of every member (or those named) for one input, writing nothing.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    input : str or os.PathLike
        One restart file, opened read-only.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    members : sequence of str, optional
        Only these members (default: every member of the recipe).
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).

    Returns
    -------
    list of (Member, dict)
        Each member and its ledger (as :func:`preview` returns it).

    Raises
    ------
    InputError
        Bad input (recipe, layout, file, an unknown member name); nothing is written either way.

    Examples
    --------
    >>> for member, ledger in initgen.api.preview_members("pairs.yaml", "start1.nc"):  # doctest: +SKIP
    ...     print(member.name, ledger["region"])
    """

    rec = _recipe(recipe)
    return manifest.preview(rec, input, _layout(layout, rec), names=members, allow_outside_paths=allow_outside_paths)


def perturb(dataset, recipe, layout=None, *, allow_outside_paths: bool = False):
    """In-memory version for notebooks: returns ``(new_dataset, ledger)``; the input is untouched.

    Parameters
    ----------
    dataset : xarray.Dataset
        The restart state, in memory; copied, never changed.
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).

    Returns
    -------
    tuple of (xarray.Dataset, dict)
        The perturbed copy (with one more ``history`` line) and the ledger.

    Raises
    ------
    InputError
        Any bad input; ``dataset`` is left as it was.

    Examples
    --------
    >>> import xarray as xr, initgen
    >>> new_ds, ledger = initgen.perturb(xr.open_dataset("restart.nc"), "recipe.yaml")  # doctest: +SKIP
    """
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
    """The combined horizontal weight field max_i w_i(x) and the grid, for maps and mask files.

    Parameters
    ----------
    recipe : str, os.PathLike, dict or Document
        The recipe: a YAML file, an already-parsed mapping or a loaded document.
    input : str or os.PathLike
        The restart file, opened read-only.
    layout : str, os.PathLike, dict or Document, optional
        Where the model keeps each quantity; without one, roles are found from CF attributes
        (or the recipe's inline layout).
    allow_outside_paths : bool
        Let the recipe read files outside its own folder (``--allow-outside-paths``).

    Returns
    -------
    weight : numpy.ndarray
        max over the recipe's blocks of w(x) in [0, 1], on the file's whole horizontal grid.
    grid : initgen.io.model.Grid
        The file's horizontal grid (longitudes, latitudes, cell areas where known).
    plan : initgen.engine.fields.Plan
        The plan the weights come from.

    Raises
    ------
    InputError
        Bad input (recipe, layout or file).

    Examples
    --------
    >>> w, grid, plan = initgen.api.weights("recipe.yaml", "restart.nc")  # doctest: +SKIP
    """
    with open_plan(recipe, input, layout, allow_outside_paths=allow_outside_paths) as p:
        w = p.plan.full(np.max([b.weight for b in p.plan.blocks], axis=0))
        return w, p.model.grid, p.plan


def collate(records, out_dir, labels=None, threshold: float = 0.25) -> dict:
    """Collate provenance records (files, folders, manifests) into ``out_dir``: collation.csv,
    collation.json and collation.html, side by side per depth band.

    Parameters
    ----------
    records : sequence of str or os.PathLike
        Provenance records, folders holding them, or ensemble manifests.
    out_dir : str or os.PathLike
        Folder for the three files (its parent must exist).
    labels : sequence of str, optional
        A label per record, in order (default: the model or file name).
    threshold : float
        Relative difference of band means above which records are said to differ.

    Returns
    -------
    dict
        The collation as written to collation.json, with ``ok`` (False when any record differs
        from the others beyond ``threshold``) and ``written`` (the three paths).

    Raises
    ------
    InputError
        An unreadable record or an unwritable ``out_dir``; nothing half-written.

    Examples
    --------
    >>> col = initgen.api.collate(["a/out.nc.provenance.json", "b/"], "collation")  # doctest: +SKIP
    >>> col["ok"]  # doctest: +SKIP
    """

    return collate_mod.collate(records, out_dir, labels=labels, threshold=threshold)


__all__ = ["check", "preview", "preview_members", "apply", "apply_ensemble", "perturb", "weights", "open_plan", "ledger_text",
           "collate", "apply_tiles"]
