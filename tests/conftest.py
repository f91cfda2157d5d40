"""Fixtures shared by the test folders (pytest finds them here; nothing imports this file).

Plain helpers live in ``tests/filemaker.py`` (the file makers) and ``tests/clikit.py`` (the tests'
recipes, ``sha``, ``read_raw``, the CLI's ``refused``), which the test modules import; the fixtures
below build on them.
"""

from __future__ import annotations

import os
import shutil

import pytest

from initgen.demo import run_demo

import clikit
import filemaker

# The processes the tests start (``python -m initgen.cli``, the fault tests' runners) import the
# same initgen as the tests: the checkout's, ahead of any installed copy (pyproject.toml's
# ``pythonpath`` does this for the tests' own process).
os.environ["PYTHONPATH"] = os.pathsep.join(p for p in (str(clikit.ROOT), os.environ.get("PYTHONPATH")) if p)


@pytest.fixture
def work(tmp_path):
    """A folder with a small regular input file ``in.nc`` (10-degree global grid, CF names)."""
    filemaker.regular(tmp_path / "in.nc")
    return tmp_path


@pytest.fixture
def make_recipe(tmp_path):
    """The recipe factory: ``make_recipe(w, e, s, n, **keys)`` writes
    :func:`clikit.box_recipe_text` to ``tmp_path`` (``file=`` names it; ``r.yaml`` by default)."""

    def make(*box, file="r.yaml", **keys):
        return clikit.recipe(tmp_path, clikit.box_recipe_text(*box, **keys), file)

    return make


@pytest.fixture(scope="session")
def demo_folder(tmp_path_factory):
    """The built-in demo (``initgen.demo.run_demo``), made once for the whole session: the demo
    restart, its perturbed copy and provenance record, the shipped recipes, the extra inputs and
    the preview report. Read only: a test that writes beside these files uses ``demo_copy``."""
    out = tmp_path_factory.mktemp("demo")
    run_demo(out)
    return out


@pytest.fixture(scope="module")
def demo_copy(demo_folder, tmp_path_factory):
    """A copy of :func:`demo_folder` for one test module, which may write into it."""
    out = tmp_path_factory.mktemp("demo")
    shutil.copytree(demo_folder, out, dirs_exist_ok=True)
    return out
