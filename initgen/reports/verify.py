"""Verify a provenance record: re-run it and check the recorded output against the re-run
(``initgen verify``).
"""

from __future__ import annotations

import inspect
import json
import tempfile
import warnings
from pathlib import Path

from initgen import api
from initgen._version import __version__
from initgen.config.recipe import document_from_text, inline_layout, load_layout, load_recipe
from initgen.errors import InputError
from initgen.io.atomic import sha256_file
from initgen.outputs import provenance as prov
from initgen.reports.common import _py, _short
from initgen.reports.compare import compare


def _locate(entry: dict | None, record_dir: Path) -> tuple[Path | None, str]:
    """A file named in a provenance record: beside the record (its relative path) first, then the
    recorded absolute path; (None, "") when neither is there."""
    rel = (entry or {}).get("relative_path")
    if rel:
        cand = record_dir / rel
        if cand.is_file():
            return cand, "beside the record"
    path = (entry or {}).get("path")
    if path and Path(path).is_file():
        return Path(path), "at its recorded path"
    return None, ""


def _load_document(entry: dict, kind: str, record_dir: Path, override=None, recipe_doc=None, rec=None):
    """The recipe or layout of a provenance record, and where it came from: the file given
    (``override``), the file beside the record or at its recorded path, or the text the record
    keeps (whose canonical sha256 the caller checks like a file's)."""

    loader = load_recipe if kind == "recipe" else load_layout
    if override is not None:
        return loader(override), f"{override} (given)"
    path = entry.get("path")
    recipe_entry = (rec or {}).get("recipe") or {}
    if kind == "layout" and recipe_doc is not None and path and path == recipe_entry.get("path"):
        doc = inline_layout(recipe_doc)  # the layout was written inside the recipe
        if doc is None:
            raise InputError(f"{path}: the recorded layout was inline in this recipe, which no longer has one")
        return doc, "inline in the recipe"
    found, how = _locate(entry, record_dir)
    if found is not None:
        return loader(found), f"{found} ({how})"
    if entry.get("text"):
        rel = entry.get("relative_path")
        home = record_dir / rel if rel else Path(path) if path else record_dir / f"{kind}.yaml"
        doc = document_from_text(entry["text"], kind, home, f"provenance record ({kind}.text)")
        return doc, f"the {kind} text stored in the record (its file {path} is gone; files it names are " \
                    f"looked for in {home.parent})"
    if not path:
        raise InputError(f"provenance record: the {kind} was not read from a file and its text is not stored; "
                         f"pass --{kind} with the {kind} file")
    raise InputError(f"{path}: the recorded {kind} file is missing and the record holds no text of it; "
                     f"pass --{kind} with its current path")


def _document_changed(kind: str, doc, entry: dict, rec: dict, from_record: bool = False) -> str:
    """Why a recipe or layout no longer has its recorded canonical sha256."""

    want = str(entry.get("sha256"))[:12]
    if from_record:
        return (f"the {kind} text stored in the record has canonical sha256 {doc.sha256[:12]}..., not the recorded "
                f"{want}...: the record was edited after apply; give the {kind} file with --{kind}")
    if entry.get("text") is not None and doc.text == entry["text"]:
        then = (rec.get("versions") or {}).get("initgen")
        return (f"the {kind} {entry.get('path')} is unchanged, but this initgen ({__version__}) reads it differently "
                f"from the one that applied it ({then}): canonical sha256 {doc.sha256[:12]}... is not the recorded "
                f"{want}...; verify with the initgen version of the record")
    return (f"the {kind} {entry.get('path')} has changed since apply (canonical sha256 {doc.sha256[:12]}... is not "
            f"the recorded {want}...); restore the recorded text (provenance record, {kind}.text)")


def verify(provenance_path, input=None, output=None, recipe=None, layout=None) -> dict:
    """Re-run a provenance record and check the recorded output against the re-run.

    Parameters
    ----------
    provenance_path : str or path-like
        The ``.provenance.json`` written by ``apply``.
    input : str or path-like, optional
        The original input (default: its path relative to the record, then the recorded
        absolute path).
    output : str or path-like, optional
        The file to check (default: the file the record sits beside, ``X`` for
        ``X.provenance.json``, then the recorded paths).
    recipe, layout : str or path-like, optional
        The recipe and layout files (default: beside the record as recorded, then the recorded
        absolute path, then the text stored in the record; the canonical sha256 is checked
        whichever is used).

    Returns
    -------
    dict
        ``ok`` (bool), ``message`` (one paragraph saying what was checked and what failed, naming
        the variables that differ), ``checks`` (name -> bool) and, when the re-run was made,
        ``compare`` (the :func:`compare` result of the re-run against the output).

    Raises
    ------
    InputError
        When the record, the input, the output, the recipe or the layout file cannot be read.
        The result's ``checked`` lists every file used and where it was found, so a moved
        submission folder never silently checks the original files instead of its copies.

    Notes
    -----
    The ``history`` line of a run holds its time, so a whole file is never bit-identical across
    runs. ``verify`` therefore checks that (1) the input's sha256 is the recorded one, (2) the
    recipe and layout files have the recorded canonical sha256, (3) the output's sha256 is the
    recorded one (the file was not altered after ``apply``), (4) the output differs from a
    re-run of the recorded recipe in nothing but the global ``history`` attribute, and (5) the
    re-run's ledger equals the recorded ledger (and, for an ensemble member, the member's
    scale, offset and seed). The re-run is written into a temporary folder (``TMPDIR``), which
    needs as much free space as the output, and removed afterwards.
    """

    record_path = Path(provenance_path)
    rec = prov.load(record_path)
    record_dir = record_path.resolve().parent
    try:
        recipe_entry, layout_entry = rec["recipe"], rec.get("layout")
        want_in, want_out = rec["input"]["sha256"], rec["output"]["sha256"]
        in_entry, out_entry = dict(rec["input"]), dict(rec["output"])
    except (KeyError, TypeError):
        raise InputError(f"{provenance_path}: the provenance record lacks input, output or recipe entries; "
                         "give the .provenance.json written by initgen apply") from None
    if record_path.name.endswith(".provenance.json"):  # a record sits beside its output
        out_entry["relative_path"] = record_path.name[: -len(".provenance.json")]
    checked = []
    paths = {}
    for what, entry, given in (("input", in_entry, input), ("output", out_entry, output)):
        if given is not None:
            paths[what], how = Path(given), "given"
        else:
            paths[what], how = _locate(entry, record_dir)
        if paths[what] is None or not paths[what].is_file():
            tried = [str(paths[what])] if paths[what] is not None else []
            if given is None and entry.get("relative_path"):
                tried.append(str(record_dir / entry["relative_path"]))
            if given is None and entry.get("path") and entry["path"] not in tried:
                tried.append(str(entry["path"]))
            raise InputError(f"{' nor '.join(tried) or what}: the {what} file is not there; pass --{what} with "
                             "its current path")
        checked.append(f"{what} {paths[what]} ({how})")
    in_path, out_path = paths["input"], paths["output"]
    member = rec.get("member") or None
    member_kw = {}
    if member:
        if "member" not in inspect.signature(api.apply).parameters:
            raise InputError(f"{provenance_path}: this record is of ensemble member {member.get('name')}, and this "
                             "initgen cannot apply one member; verify it with the initgen version of the record")
        member_kw["member"] = member.get("name")
    failures: list[str] = []
    checks: dict = {}

    checks["input_sha256"] = sha256_file(in_path) == want_in
    if not checks["input_sha256"]:
        failures.append(f"the input {in_path} differs from the one recorded (sha256 is not {want_in[:12]}...); "
                        "use the original input")
    recipe_doc, how = _load_document(recipe_entry, "recipe", record_dir, recipe)
    checked.append(f"recipe {how}")
    checks["recipe_sha256"] = recipe_doc.sha256 == recipe_entry.get("sha256")
    if not checks["recipe_sha256"]:
        failures.append(_document_changed("recipe", recipe_doc, recipe_entry, rec, how.startswith("the recipe text")))
    layout_doc = None
    if layout_entry:
        layout_doc, how = _load_document(layout_entry, "layout", record_dir, layout, recipe_doc, rec)
        checked.append(f"layout {how}")
        checks["layout_sha256"] = layout_doc.sha256 == layout_entry.get("sha256")
        if not checks["layout_sha256"]:
            failures.append(_document_changed("layout", layout_doc, layout_entry, rec, how.startswith("the layout text")))
    for key, f in (recipe_entry.get("files") or {}).items():
        # where the re-run will read it: beside the recipe in use, else where it was
        fpath = Path(f["path"])
        rel = f.get("relative_to_recipe")
        if rel and recipe_doc.path is not None and (recipe_doc.base_dir / rel).is_file():
            fpath = recipe_doc.base_dir / rel
        now = sha256_file(fpath) if fpath.is_file() else None
        checked.append(f"file {fpath} (recipe key {key})")
        checks[f"file {key}"] = now == f["sha256"]
        if now != f["sha256"]:
            failures.append(f"the file {fpath} (recipe key {key}) "
                            + ("is missing" if now is None else "has changed since the run")
                            + f"; the recorded sha256 is {f['sha256'][:12]}...")
    checks["output_sha256"] = sha256_file(out_path) == want_out
    if not checks["output_sha256"]:
        failures.append(f"the output {out_path} was altered after apply (its sha256 is not the recorded "
                        f"{want_out[:12]}...)")
    result: dict = {"ok": False, "checks": checks, "checked": checked}
    if not failures or set(k for k, v in checks.items() if not v) <= {"output_sha256"}:
        allow_outside = bool((rec.get("options") or {}).get("allow_outside_paths", False))
        with tempfile.TemporaryDirectory(prefix="initgen-verify-") as tmp:
            rerun = Path(tmp) / ("rerun-" + out_path.name)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                new = api.apply(recipe_doc, in_path, rerun, layout_doc, allow_outside_paths=allow_outside,
                                **member_kw)
            cmp_ = compare(rerun, out_path, allow=())
        result["compare"] = cmp_
        checks["same_as_rerun"] = bool(cmp_["ok"])
        if not cmp_["ok"]:
            names = [n for n, v in cmp_["variables"].items() if v.get("status") != "identical"]
            other = [d for d in cmp_["differences"] if not d.startswith("variable '")]
            what = []
            if names:
                what.append("variable(s) " + ", ".join(names))
            what += other
            failures.append(f"the output differs from a re-run of recipe '{recipe_doc.name}' in "
                            + "; ".join(what) + " (details: initgen compare)")
        led_new = json.loads(json.dumps(_py(new["ledger"])))
        led_old = json.loads(json.dumps(_py(rec.get("ledger"))))
        checks["ledger"] = led_new == led_old
        if not checks["ledger"]:
            keys = sorted(k for k in set(led_new) | set(led_old or {}) if led_new.get(k) != (led_old or {}).get(k))
            failures.append(f"the re-run's ledger differs from the recorded one in: {', '.join(keys)}")
        if member:
            checks["member"] = _py(new.get("member")) == _py(member)
            if not checks["member"]:
                failures.append(f"member {member.get('name')} of the recipe now means something else "
                                f"({_short(new.get('member'), 80)} vs the recorded {_short(member, 80)})")
        vnew, vold = new.get("versions") or {}, rec.get("versions") or {}
        changed_v = sorted(k for k in set(vnew) | set(vold) if vnew.get(k) != vold.get(k))
        if changed_v and failures:
            failures.append("library versions differ from the record (" + ", ".join(
                f"{k} {vold.get(k)} -> {vnew.get(k)}" for k in changed_v) + "), which may explain it")
    else:
        failures.append("not re-run: fix the above first")
    result["ok"] = not failures
    if result["ok"]:
        result["message"] = (f"verified: {out_path} is the recorded output (sha256 {want_out[:12]}...) and equals a "
                             f"re-run of recipe '{recipe_doc.name}' on {in_path} in everything but the history "
                             "line; the ledger is identical")
    else:
        result["message"] = f"NOT verified: {out_path}: " + "; ".join(failures)
    return _py(result)
