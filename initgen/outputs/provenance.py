"""The provenance record written beside every perturbed file, and the CF ``history`` line."""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

from initgen._version import __version__
from initgen.errors import InputError
from initgen.io.atomic import copy_and_patch, sha256_file, write_atomic_text
from initgen.io.stores import versions

FORMAT = "initgen-provenance/1"


def utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def history_line(recipe, when: str) -> str:
    """One CF ``history`` line: time, tool, version and recipe hash."""

    return f"{when}: initgen {__version__} applied recipe '{recipe.name}' (sha256 {recipe.sha256})"


def provenance_path(output: Path) -> Path:
    return Path(str(output) + ".provenance.json")


def relative_to(path, folder) -> str | None:
    """``path`` relative to ``folder`` (both resolved), with '/' separators; None on another drive."""

    if path is None:
        return None
    try:
        return Path(os.path.relpath(Path(path).resolve(), Path(folder).resolve())).as_posix()
    except ValueError:
        return None


def record(*, recipe, layout, input_path: Path, input_sha256: str, output_path: Path, output_sha256: str,
           started: str, ended: str, ledger: dict, history: str, member: dict | None = None,
           allow_outside: bool = False, command_line: list | None = None, io: dict | None = None,
           files: dict | None = None) -> dict:
    # "relative_path": from the record's folder (the output's), so a moved or copied submission
    # folder verifies on its own files; "relative_to_recipe": a file the recipe reads, from its folder
    here = Path(output_path).resolve().parent
    recipe_files = {}
    for key, f in (files or {}).items():
        recipe_files[key] = dict(f)
        if recipe.path is not None and f.get("path"):
            recipe_files[key]["relative_to_recipe"] = relative_to(f["path"], Path(recipe.path).parent)
    return {
        "format": FORMAT,
        "recipe": {"name": recipe.name, "path": str(recipe.path) if recipe.path else None,
                   "relative_path": relative_to(recipe.path, here), "sha256": recipe.sha256, "text": recipe.text,
                   "files": recipe_files},
        "layout": None if layout is None else {"name": layout.name, "path": str(layout.path) if layout.path else None,
                                               "relative_path": relative_to(layout.path, here),
                                               "sha256": layout.sha256, "text": layout.text},
        "input": {"path": str(Path(input_path).resolve()), "relative_path": relative_to(input_path, here),
                  "size_bytes": Path(input_path).stat().st_size, "sha256": input_sha256},
        "output": {"path": str(Path(output_path).resolve()), "relative_path": Path(output_path).name,
                   "sha256": output_sha256},
        "member": member,
        "options": {"allow_outside_paths": allow_outside},
        "versions": versions(),
        "command_line": list(sys.argv if command_line is None else command_line),
        "started_utc": started,
        "ended_utc": ended,
        "history_line": history,
        "io": io or {},
        "ledger": ledger,
    }


def write_perturbed(*, recipe, layout, input_path, output_path, patch, force: bool = False,
                    allow_outside: bool = False, member: dict | None = None, input_sha256: str | None = None,
                    command_line: list | None = None, repack: bool = False, files: dict | None = None) -> dict:
    """Copy ``input_path`` to ``output_path``, run ``patch(out_store) -> ledger`` on the copy, and
    write the provenance record beside it; returns the record.

    The output and its record appear together or not at all (the record is written before the
    output is moved into place, and removed again if that move fails). ``api.apply`` and every
    ensemble member go through here.
    """

    input_path, output_path = Path(input_path), Path(output_path)
    started = utc_now()
    history = history_line(recipe, started)
    holder: dict = {}
    timings: dict = {}
    # the input is hashed on a second core while it is being copied (both read the same pages)
    pool = ThreadPoolExecutor(max_workers=1)
    input_hash = pool.submit(lambda: input_sha256 or sha256_file(input_path))

    def run(out_store):
        holder["ledger"] = patch(out_store)
        holder["bytes"] = int(getattr(out_store, "bytes_written", 0))

    def after(tmp: Path):
        t = time.perf_counter()
        out_sha = sha256_file(tmp)
        timings["hash_output_s"] = time.perf_counter() - t
        size_in, size_out = input_path.stat().st_size, tmp.stat().st_size
        io = {"bytes_rewritten": holder["bytes"], "input_size_bytes": size_in, "output_size_bytes": size_out,
              "size_growth_bytes": size_out - size_in, "repacked": bool(repack),
              "timings_s": {k: round(v, 4) for k, v in timings.items()}}
        holder["record"] = record(
            recipe=recipe, layout=layout, input_path=input_path, input_sha256=input_hash.result(),
            output_path=output_path, output_sha256=out_sha, started=started, ended=utc_now(),
            ledger=holder["ledger"], history=history, member=member, allow_outside=allow_outside,
            command_line=command_line, io=io, files=files)

        write_atomic_text(provenance_path(output_path), dumps(holder["record"]))

    try:
        copy_and_patch(input_path, output_path, run, force=force, history=history, after=after, timings=timings,
                       repack_output=repack)
    except BaseException:
        if "record" in holder and not output_path.exists():
            with contextlib.suppress(OSError):
                provenance_path(output_path).unlink()
        raise
    finally:
        pool.shutdown(wait=True)
    return holder["record"]


def dumps(rec: dict) -> str:
    return json.dumps(rec, indent=2, sort_keys=False, allow_nan=False) + "\n"


def load(path: Path) -> dict:
    path = Path(path)
    try:
        rec = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: provenance file not found; check the path") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: not a readable provenance record ({exc.__class__.__name__}); "
                         "give the .provenance.json written by initgen apply") from None
    if not isinstance(rec, dict) or rec.get("format") != FORMAT:
        raise InputError(f"{path}: not an initgen provenance record (format {FORMAT} expected)")
    return rec


__all__ = ["record", "write_perturbed", "history_line", "provenance_path", "utc_now", "dumps", "load", "sha256_file"]
