"""The output policy: every path a command writes is checked before any work starts.

One home for the checks the commands share (the CLI's targets, the collation folder, the
ensemble folder): an existing file is refused unless ``--force``; a missing or unwritable folder
is refused naming it; a path of the wrong kind (a folder where a file goes, a file where a folder
goes) is refused saying which is wanted. Nothing here creates anything. Each message starts with
``what`` (the option and the path, e.g. ``--out results``), so the user sees which argument to
change. (The writer's own last check, that an output is never the input, is
``io.atomic.check_output_path``.)
"""

from __future__ import annotations

import os
from pathlib import Path

from initgen.errors import InputError


def _parent(path: Path) -> Path:
    return path.parent if str(path.parent) else Path(".")


def need_folder(path, what: str, hint: str = "give a folder") -> None:
    """Refuse ``path`` when it exists and is not a folder (``hint`` says what to give instead)."""
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise InputError(f"{what}: exists and is not a folder; {hint}")


def writable_folder(folder, what: str) -> None:
    """Refuse a ``folder`` that does not exist or that this process cannot create files in."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{what}: the folder {folder} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{what}: the folder {folder} is not writable; choose another folder")


def file_target(path, option: str, force: bool) -> None:
    """A file the command writes: its folder exists and is writable; an existing file needs ``force``."""
    p = Path(path)
    what = f"{option} {p}" if option else str(p)
    if p.is_dir():
        raise InputError(f"{what}: is a folder; remove it or choose another file name")
    parent = _parent(p)
    if parent.exists() and not parent.is_dir():
        raise InputError(f"{what}: {parent} is not a folder; give a path inside a folder")
    writable_folder(parent, what)
    if p.exists() and not force:
        raise InputError(f"{what}: exists; pass --force to replace it")


def folder_target(path, option: str, force: bool, files=(), any_file: bool = False) -> None:
    """A folder the command writes into (created if missing, inside an existing writable folder);
    ``files`` already there (or, with ``any_file``, anything at all) need ``force``."""
    p = Path(path)
    what = f"{option} {p}"
    need_folder(p, what)
    if not p.exists():
        writable_folder(_parent(p), what)
        return
    writable_folder(p, what)
    taken = sorted(p.iterdir()) if any_file else [p / f for f in files if (p / f).exists()]
    if taken and not force:
        raise InputError(f"{what}: already holds {taken[0].name}" + (f" and {len(taken) - 1} more" if len(taken) > 1
                         else "") + "; pass --force to replace, or choose another folder")


__all__ = ["need_folder", "writable_folder", "file_target", "folder_target"]
