"""The tests' shared helpers for running initgen: the checkout's paths, sha256 and a raw reader,
the tests' recipes and the command line's refusal check (exit 2, one line, nothing written).

The model files the tests feed to initgen are made by ``tests/filemaker.py``; the pytest fixtures
built on both (a folder with a small input, the demo made once per session, a recipe factory) are
in ``tests/conftest.py``. Importable from every test folder (pyproject.toml's ``pythonpath``).
"""

from __future__ import annotations

import hashlib
import time
import warnings
from pathlib import Path

import netCDF4
import numpy as np

from initgen.cli import main

#: The checkout: the shipped recipes and layouts the tests run, and the tests' own data files.
ROOT = Path(__file__).resolve().parents[1]
RECIPES = ROOT / "recipes"
LAYOUTS = RECIPES / "layouts"
DATA = Path(__file__).resolve().parent / "data"


def sha(path) -> str:
    """sha256 of a file's bytes (hashlib), as the provenance record states it."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def read_raw(path, name, dtype=None):
    """A variable's values as stored (no unpacking, no masking); as ``dtype`` if given."""
    with netCDF4.Dataset(path) as ds:
        v = ds.variables[name]
        v.set_auto_maskandscale(False)
        return np.array(v[:], dtype=dtype)


# =============================================================================================
# The tests' recipes
# =============================================================================================


def box_recipe_text(w=20, e=80, s=10, n=50, *, name="test-box", block="box", anomaly_K=-2.0, taper_km=None,
                    placement=None, profile="kind: uniform") -> str:
    """A recipe of one block: a lon/lat box, a constant anomaly (K) and a depth profile (the YAML
    inside its braces). The taper keys are written only when given."""
    lines = ["initgen_recipe: 1", f"name: {name}", "perturbations:", f"  - name: {block}", "    region:",
             f"      include: [{{box: {{lon: [{w}, {e}], lat: [{s}, {n}]}}}}]"]
    if taper_km is not None:
        lines.append(f"      taper_km: {taper_km}")
    if placement is not None:
        lines.append(f"      taper_placement: {placement}")
    lines += [f"    anomaly: {{constant_K: {anomaly_K}}}", f"    profile: {{{profile}}}"]
    return "\n".join(lines) + "\n"


def tapered_recipe_text(name: str) -> str:
    """The error catalogue's and the fault tests' recipe: a box with a 200 km taper, -2 K decaying
    with depth (e-folding 0.5 m). Tests change it by replacing a line of its text (:func:`swap`)."""
    return box_recipe_text(name=name, block="blk", anomaly_K=-2, taper_km=200,
                           profile="kind: exponential, efolding_m: 0.5")


#: The error catalogue's recipe, which :func:`recipe` writes and :func:`swap` edits by default.
CATALOGUE_RECIPE = tapered_recipe_text("cat")


def recipe(folder: Path, text: str = CATALOGUE_RECIPE, name: str = "r.yaml") -> Path:
    """Write a recipe ``text`` to ``folder/name``."""
    p = Path(folder) / name
    p.write_text(text)
    return p


def swap(old: str, new: str, text: str = CATALOGUE_RECIPE) -> str:
    """``text`` with ``old`` (which must be in it) replaced by ``new``."""
    assert old in text, old
    return text.replace(old, new)


def field_recipe(folder, file="anom.nc", variable="anom"):
    """The catalogue's recipe with its anomaly read from a field file (``filemaker.field_file``)."""
    return recipe(folder, swap("anomaly: {constant_K: -2}",
                               f"anomaly: {{field: {{file: {file}, variable: {variable}}}}}"))


def geo_recipe(folder, name="shape.geojson"):
    """The catalogue's recipe with its box replaced by the GeoJSON file ``name``."""
    return recipe(folder, swap("{box: {lon: [20, 80], lat: [10, 50]}}", f"{{geojson: {name}}}"))


#: The error catalogue's layout, for the small regular file of the ``work`` fixture (lev: 5 layers).
CATALOGUE_LAYOUT = """\
initgen_layout: 1
name: test-model
roles:
  longitude: lon
  latitude: lat
  soil_temperature: tsoil
  land_fraction: landfrac
  layer_node_depth: {values: [0.05, 0.15, 0.35, 0.75, 1.5], units: m}
"""


def layout(folder, text=CATALOGUE_LAYOUT):
    """Write a layout ``text`` to ``folder/layout.yaml``."""
    p = Path(folder) / "layout.yaml"
    p.write_text(text)
    return p


# =============================================================================================
# The command line's refusal, as the README promises it (exit 2, one line, nothing written)
# =============================================================================================

_QUIET = (DeprecationWarning, PendingDeprecationWarning, ImportWarning, ResourceWarning)


def apply_argv(work, rec, *extra, output="out.nc"):
    """``initgen apply`` of recipe ``rec`` on ``work/in.nc`` to ``work/output``, then ``extra``."""
    return ["apply", rec, "--input", work / "in.nc", "--output", work / output, *extra]


def listing(folder: Path) -> dict:
    """Every file under ``folder`` with its sha256 (folders by name only)."""
    out = {}
    for p in sorted(Path(folder).rglob("*")):
        out[str(p.relative_to(folder))] = sha(p) if p.is_file() else "<dir>"
    return out


def run(argv):
    """Run the CLI; return (exit code, stdout, stderr lines incl. warnings shown to the user)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            rc = main([str(a) for a in argv])
        except SystemExit as exc:  # argparse errors
            rc = exc.code
    shown = [f"initgen: warning: {w.message}" for w in caught if not issubclass(w.category, _QUIET)]
    return rc, shown


def refused(capsys, argv, *phrases, folder: Path, watch=()):
    """Assert the CLI refuses ``argv`` the way the README promises; return the message line.

    ``folder`` is the test's working folder: nothing in it may change (no output, no record,
    no temporary), and every file in it keeps its sha256. ``watch`` adds files elsewhere.
    """
    folder = Path(folder)
    before = listing(folder)
    watched = {Path(p): sha(p) for p in watch}
    capsys.readouterr()
    rc, shown = run(argv)
    cap = capsys.readouterr()
    lines = shown + cap.err.splitlines()
    assert rc == 2, f"exit {rc}, stderr: {cap.err!r}, stdout: {cap.out!r}"
    assert len(lines) == 1, f"expected one stderr line, got {lines!r}"
    line = lines[0]
    assert line.startswith("initgen: error: "), line
    assert "Traceback" not in cap.err + cap.out
    for phrase in phrases:
        assert phrase in line, f"{phrase!r} not in {line!r}"
    after = listing(folder)
    assert not [k for k in after if k.endswith(".initgen-tmp")], after
    assert after == before, f"files changed: {set(after) ^ set(before)}"
    for p, h in watched.items():
        assert sha(p) == h, f"{p} changed"
    return line


def one_error_line(capsys):
    """The one line the CLI printed on stderr, which must be an error; for the tests that check
    more than :func:`refused` does (what was kept, what the fault left)."""
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 1 and err[0].startswith("initgen: error: "), err
    return err[0]


# =============================================================================================
# Real processes (the fault and interrupt tests): a folder's names, a marker a process touches
# =============================================================================================


def names(folder) -> set:
    """The names in ``folder`` (not recursive)."""
    return {p.name for p in Path(folder).iterdir()}


def wait_for(path: Path, proc, timeout=60.0):
    """Wait until ``path`` exists (a marker the stalled process touches); fail if ``proc`` ends
    first or after ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while not path.exists():
        if proc.poll() is not None:
            out, err = proc.communicate()
            raise AssertionError(f"process ended early ({proc.returncode}): {err}")
        assert time.monotonic() < deadline, "timed out waiting for the marker"
        time.sleep(0.01)
