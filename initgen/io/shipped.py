"""Where the shipped recipes/ and masks/ live: the source checkout, or a copy inside the package.

The repository keeps one copy of each file, at the top level (recipes/, masks/). ``setup.py``
copies them into ``initgen/_shipped/`` when a wheel is built, so an installed initgen finds them
too.
"""

from __future__ import annotations

from pathlib import Path

_HERE = Path(__file__).resolve().parents[1]  # the package folder (this file is in initgen/io/)


def shipped_dir(name: str) -> Path | None:
    for base in (_HERE / "_shipped" / name, _HERE.parent / name):
        if base.is_dir():
            return base
    return None


def shipped_file(folder: str, name: str) -> Path | None:
    base = shipped_dir(folder)
    if base is None:
        return None
    path = base / name
    return path if path.is_file() else None
