"""The output policy's one home, ``initgen.io.targets``, and the writers that use it from Python.

The promise checked is README.md's "one output policy": every path a command writes is checked
before any work starts; a path of the wrong kind, a missing or unwritable folder, or an existing
file without --force is refused with an InputError that names the path, and nothing is created.
The CLI side (every command's targets, exit 2) is the catalogue in tests/test_errors_cli.py; here
are the Python entry points that share the checks: ``api.collate`` and the ensemble's folder
(an unwritable folder is in the catalogue, which can make one even for root).
"""

from __future__ import annotations

import pytest

from initgen import api
from initgen.errors import InputError
from initgen.io.targets import file_target, folder_target, need_folder
from initgen.outputs.ensemble import check_output_folder


def _listing(folder):
    return sorted(p.relative_to(folder) for p in folder.rglob("*"))


def test_file_target(tmp_path):
    (tmp_path / "taken.json").write_text("{}")
    (tmp_path / "dir").mkdir()
    before = _listing(tmp_path)
    cases = [(tmp_path / "taken.json", "exists; pass --force"),
             (tmp_path / "dir", "is a folder"),
             (tmp_path / "missing" / "x.json", f"the folder {tmp_path / 'missing'} does not exist"),
             (tmp_path / "taken.json" / "x.json", "is not a folder; give a path inside a folder")]
    for path, phrase in cases:
        with pytest.raises(InputError, match="^--json " + str(path)) as err:
            file_target(path, "--json", force=False)
        assert phrase in str(err.value)
    file_target(tmp_path / "taken.json", "--json", force=True)  # replaced with --force
    file_target(tmp_path / "new.json", "--json", force=False)
    assert _listing(tmp_path) == before  # checking creates nothing


def test_folder_target(tmp_path):
    (tmp_path / "rep").mkdir()
    (tmp_path / "rep" / "a.md").write_text("x")
    (tmp_path / "rep" / "b.md").write_text("x")
    (tmp_path / "afile").write_text("x")
    before = _listing(tmp_path)
    with pytest.raises(InputError, match="already holds a.md and 1 more; pass --force"):
        folder_target(tmp_path / "rep", "--report", False, files=("a.md", "b.md"))
    with pytest.raises(InputError, match="already holds b.md; pass --force"):
        folder_target(tmp_path / "rep", "--report", False, files=("b.md", "c.md"))
    with pytest.raises(InputError, match="already holds a.md and 1 more; pass --force"):
        folder_target(tmp_path / "rep", "--out", False, any_file=True)
    with pytest.raises(InputError, match="exists and is not a folder; give a folder$"):
        folder_target(tmp_path / "afile", "--out", False)
    with pytest.raises(InputError, match="does not exist; create it first"):
        folder_target(tmp_path / "no" / "rep", "--out", False)
    folder_target(tmp_path / "rep", "--report", False, files=("c.md",))  # other files may stay
    folder_target(tmp_path / "rep", "--report", True, files=("a.md",))
    folder_target(tmp_path / "new", "--report", False)  # created later, by the writer
    assert _listing(tmp_path) == before


def test_collate_into_a_file_is_refused_before_reading(tmp_path):
    """api.collate: the folder check comes before any record is read (the record here is absent)."""
    (tmp_path / "afile").write_text("x")
    with pytest.raises(InputError) as err:
        api.collate([tmp_path / "no-such.provenance.json"], tmp_path / "afile")
    assert str(err.value) == f"--out {tmp_path / 'afile'}: exists and is not a folder; give a folder for the collation"
    assert (tmp_path / "afile").read_text() == "x"


def test_ensemble_folder(tmp_path):
    (tmp_path / "afile").write_text("x")
    with pytest.raises(InputError) as err:
        check_output_folder(tmp_path / "afile")
    assert str(err.value) == (f"{tmp_path / 'afile'}: exists and is not a folder; an ensemble writes into a "
                              "folder (--output DIR)")
    with pytest.raises(InputError, match=f"^--output {tmp_path / 'no' / 'ens'}: the folder {tmp_path / 'no'} "
                       "does not exist"):
        check_output_folder(tmp_path / "no" / "ens")
    (tmp_path / "ens").mkdir()
    (tmp_path / "ens" / "manifest.json").write_text("{}")
    with pytest.raises(InputError, match="holds an ensemble already"):
        check_output_folder(tmp_path / "ens")
    check_output_folder(tmp_path / "ens", resume=True)
    check_output_folder(tmp_path / "ens", force=True)


def test_need_folder_hint(tmp_path):
    (tmp_path / "f").write_text("x")
    need_folder(tmp_path / "missing", "--out m")  # absent is fine: the writer creates it
    with pytest.raises(InputError, match="^--out f: exists and is not a folder; give a folder for X$"):
        need_folder(tmp_path / "f", "--out f", "give a folder for X")
