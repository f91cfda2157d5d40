"""The error catalogue, part three: the command line and the output policy.

Output paths that are the input or a recipe, existing targets without ``--force``, missing or
unwritable folders for every target of every command, the real process's one line on stderr.
Same rows and promise as ``config/test_errors_recipe.py`` (:func:`clikit.refused`).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from filemaker import regular
from clikit import CATALOGUE_RECIPE as RECIPE
from clikit import apply_argv, listing, recipe, refused, swap


# =============================================================================================
# Output paths
# =============================================================================================


def test_output_equal_to_the_input(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "in.nc", "--force"],
            "in.nc", "output is the input", "choose another name", folder=work)


def test_output_equal_to_the_input_through_another_spelling(work, capsys):
    rec = recipe(work)
    (work / "sub").mkdir()
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "sub" / ".." / "in.nc"],
            "output is the input", folder=work)


def test_output_is_a_hard_link_to_the_input(work, capsys):
    rec = recipe(work)
    os.link(work / "in.nc", work / "link.nc")
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "link.nc", "--force"],
            "link.nc", "output is the input", folder=work)


def test_existing_output_without_force(work, capsys):
    rec = recipe(work)
    (work / "out.nc").write_bytes(b"precious")
    refused(capsys, apply_argv(work, rec), "out.nc", "exists", "pass --force", folder=work)
    assert (work / "out.nc").read_bytes() == b"precious"


def test_output_is_a_folder(work, capsys):
    rec = recipe(work)
    (work / "out.nc").mkdir()
    refused(capsys, apply_argv(work, rec, "--force"), "out.nc", "is a folder", folder=work)


def test_missing_output_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "no" / "such" / "out.nc"],
            "does not exist", "create it first", folder=work)


def test_read_only_output_folder(work, capsys, monkeypatch):
    # tests run as root, which chmod does not stop: simulate a read-only folder through os.access
    ro = work / "ro"
    ro.mkdir()
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, *a, **k: False if Path(p) == ro and mode & os.W_OK
                        else real_access(p, mode, *a, **k))
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", ro / "out.nc"],
            "ro", "not writable", "choose another folder", folder=work)


def test_output_folder_refusing_writes(work, capsys, monkeypatch):
    """The folder looks writable but the file system refuses the copy (EROFS)."""
    import errno
    import shutil

    def refuse(src, dst, *a, **k):
        raise OSError(errno.EROFS, "Read-only file system", str(dst))

    monkeypatch.setattr(shutil, "copyfile", refuse)
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec), "out.nc", "Read-only file system", "choose another folder",
            folder=work)


def test_output_with_provenance_name_taken_by_a_folder(work, capsys):
    rec = recipe(work)
    (work / "out.nc.provenance.json").mkdir()
    refused(capsys, apply_argv(work, rec), "out.nc.provenance.json", "is a folder", "remove it", folder=work)


def test_unknown_subcommand_option(work, capsys):
    rec = recipe(work)
    refused(capsys, apply_argv(work, rec, "--forse"), "--forse", folder=work)


def test_apply_without_output(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc"], "--output", folder=work)


def test_preview_json_into_missing_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", work / "no" / "l.json"],
            "l.json", "does not exist", "create it first", folder=work)


def test_preview_json_onto_the_input(work, capsys):
    # once: the restart file was silently replaced by the ledger's JSON
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", work / "in.nc"],
            "in.nc", "is also an input", "choose another name", folder=work)


def test_preview_json_onto_the_recipe(work, capsys):
    rec = recipe(work)
    refused(capsys, ["preview", rec, "--input", work / "in.nc", "--json", rec], "r.yaml", "is also an input",
            folder=work)


def test_apply_output_onto_the_recipe(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", rec, "--force"], "r.yaml",
            "is also an input", folder=work)


def test_compare_json_onto_a_compared_file(work, capsys):
    regular(work / "b.nc")
    refused(capsys, ["compare", work / "in.nc", work / "b.nc", "--json", work / "b.nc"], "b.nc",
            "is also an input", folder=work)


def test_output_inside_a_file_instead_of_a_folder(work, capsys):
    rec = recipe(work)
    refused(capsys, ["apply", rec, "--input", work / "in.nc", "--output", work / "in.nc" / "out.nc"],
            "in.nc is not a folder", folder=work)


# =============================================================================================
# The real command line: one line on the real stderr, nothing else
# =============================================================================================


def test_real_process_prints_one_line_and_exit_2(work):
    rec = recipe(work, swap("taper_km: 200", "taper_km: -1"))
    before = listing(work)
    proc = subprocess.run([sys.executable, "-m", "initgen.cli", "apply", str(rec), "--input", str(work / "in.nc"),
                           "--output", str(work / "out.nc")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert proc.stdout == ""
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: error: ") and "taper_km" in lines[0]
    assert listing(work) == before


def test_real_process_corrupt_file_prints_no_library_diagnostics(work):
    """The HDF5 library can print its own error stack to stderr; only initgen's line may appear."""
    data = (work / "in.nc").read_bytes()
    (work / "cut.nc").write_bytes(data[: len(data) // 2])
    rec = recipe(work)
    before = listing(work)
    proc = subprocess.run([sys.executable, "-m", "initgen.cli", "apply", str(rec), "--input", str(work / "cut.nc"),
                           "--output", str(work / "out.nc")], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: error: ") and "cut.nc" in lines[0], lines
    assert listing(work) == before


# =============================================================================================
# Reports and CLI habits (issue 18)
# =============================================================================================


def test_compare_with_one_file_after_allow(work, capsys):
    """``--allow`` may come before the files, but two files are still needed."""
    refused(capsys, ["compare", "--allow", "tsoil", work / "in.nc"], "compare needs two files", folder=work)


def test_compare_report_folder_is_a_file(work, capsys):
    (work / "rep").write_text("not a folder")
    refused(capsys, ["compare", work / "in.nc", work / "in.nc", "--report", work / "rep"], "rep",
            "is not a folder", folder=work)


# =============================================================================================
# The output policy: every target of every command, existing, in a missing or unwritable folder
# =============================================================================================


ENSEMBLE_RECIPE = RECIPE + "members:\n  scales: [1.0]\n  signs: [1, -1]\n"


@pytest.fixture
def sealed(tmp_path):
    """A folder nothing can be created in: mode 0555, and for root (whom modes do not stop) the
    immutable attribute (chattr +i); skipped where neither holds."""
    d = tmp_path / "sealed"
    d.mkdir()
    if os.geteuid() != 0:
        d.chmod(0o555)
    elif subprocess.run(["chattr", "+i", str(d)], capture_output=True).returncode != 0:
        pytest.skip("cannot make an unwritable folder here (root without chattr +i)")
    try:
        yield d
    finally:
        if os.geteuid() == 0:
            subprocess.run(["chattr", "-i", str(d)], capture_output=True)
        d.chmod(0o755)


# command line with {T} for the target; the target's kind: a file, or a folder written into
TARGETS = {
    "apply --output": (lambda w, r: ["apply", r, "--input", w / "in.nc", "--output", "{T}"], "file"),
    "apply ensemble --output": (lambda w, r: ["apply", recipe(w, ENSEMBLE_RECIPE, "e.yaml"), "--input",
                                              w / "in.nc", "--output", "{T}"], "ensemble"),
    "mask --output": (lambda w, r: ["mask", r, "--input", w / "in.nc", "--output", "{T}"], "file"),
    "mask --png": (lambda w, r: ["mask", r, "--input", w / "in.nc", "--output", w / "m.nc", "--png", "{T}"], "file"),
    "preview --json": (lambda w, r: ["preview", r, "--input", w / "in.nc", "--json", "{T}"], "file"),
    "preview --report": (lambda w, r: ["preview", r, "--input", w / "in.nc", "--json", w / "l.json",
                                       "--report", "{T}"], "report"),
    "compare --json": (lambda w, r: ["compare", w / "in.nc", w / "in.nc", "--json", "{T}"], "file"),
    "compare --report": (lambda w, r: ["compare", w / "in.nc", w / "in.nc", "--report", "{T}"], "report"),
    "demo --out": (lambda w, r: ["demo", "--out", "{T}"], "demo"),
    # the targets are checked before any record is read, so any file stands in for the record here
    "collate --out": (lambda w, r: ["collate", w / "in.nc", "--out", "{T}"], "collation"),
}


def _argv(work, target, path):
    make, _ = TARGETS[target]
    return [str(path) if a == "{T}" else a for a in make(work, recipe(work))]


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_that_exists(work, capsys, target):
    kind = TARGETS[target][1]
    path = work / "taken"
    if kind == "file":
        path.write_text("someone's file\n")
        phrases = ("taken", "exists", "--force")
    else:
        path.mkdir()
        name = {"ensemble": "manifest.json", "report": "preview.md" if "preview" in target else "compare.md",
                "demo": "notes.txt", "collation": "collation.html"}[kind]
        (path / name).write_text("someone's file\n")
        phrases = ("taken", name if kind != "ensemble" else "holds an ensemble already", "--force")
    argv = _argv(work, target, path)
    refused(capsys, argv, *phrases, folder=work)


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_in_a_missing_folder(work, capsys, target):
    path = work / "missing" / "t"
    refused(capsys, _argv(work, target, path), str(work / "missing"), "does not exist", "create it first",
            folder=work)


@pytest.mark.parametrize("target", list(TARGETS))
def test_output_target_in_an_unwritable_folder(work, sealed, capsys, target):
    path = sealed / "t"
    refused(capsys, _argv(work, target, path), str(sealed), "not writable", "choose another folder", folder=work)


def test_apply_output_whose_provenance_record_exists(work, capsys):
    (work / "out.nc.provenance.json").write_text("{}\n")  # an earlier record: replaced only with --force
    refused(capsys, apply_argv(work, recipe(work)), "out.nc.provenance.json", "exists", "--force", folder=work)


def test_resume_for_a_single_output_file(work, capsys):
    refused(capsys, apply_argv(work, recipe(work), "--resume"), "--resume", "ensemble", folder=work)

