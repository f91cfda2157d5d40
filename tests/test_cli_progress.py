"""The CLI's progress line, drawn by tqdm, checked on a real pseudo-terminal.

What a terminal shows is rebuilt from the bytes written to the pty by a small screen model
(``screen``: a carriage return moves to the left margin and later characters overwrite, a line
feed starts a new line), the way a VT100-style terminal treats them (ECMA-48, control functions
CR and LF). The cases: a terminal with a size (80 x 24) and one that never had a size set (a pty
reports 0 x 0 then; tqdm on its own draws nothing there), ``-q``, stderr that is not a terminal,
an ensemble's failed members, and a stopped bar followed by an error line.
"""

from __future__ import annotations

import fcntl
import os
import pty
import re
import struct
import subprocess
import sys
import termios
import threading
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from initgen.cli import _Progress, _progress
from filemaker import regular
from clikit import read_raw
from clikit import CATALOGUE_RECIPE as RECIPE  # the error catalogue's small recipe: a box with a taper

FULL = "[" + "#" * 30 + "]"


def screen(text: str) -> list[str]:
    """The lines a terminal shows after receiving ``text`` (CR: back to column 0; LF: next line)."""
    lines, col = [[]], 0
    for ch in text:
        if ch == "\r":
            col = 0
        elif ch == "\n":
            lines.append([])
            col = 0
        else:
            line = lines[-1]
            line.extend(" " * (col + 1 - len(line)))
            line[col] = ch
            col += 1
    return ["".join(line).rstrip() for line in lines if "".join(line).strip()]


def _open_pty(size):
    master, slave = pty.openpty()
    if size is not None:
        rows, cols = size
        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", rows, cols, 0, 0))
    return master, slave


def _drain(master, chunks):
    while True:
        try:
            data = os.read(master, 4096)
        except OSError:  # EIO: every writer of the pty has closed it
            return
        if not data:
            return
        chunks.append(data)


def run_on_pty(argv, size=None) -> tuple[int, str, str]:
    """Run ``initgen argv`` with stderr on a new pty (stdout a pipe, COLUMNS and LINES unset);
    return the exit code, stdout and what the terminal received on stderr."""
    master, slave = _open_pty(size)
    env = {k: v for k, v in os.environ.items() if k not in ("COLUMNS", "LINES")}
    chunks: list[bytes] = []
    reader = threading.Thread(target=_drain, args=(master, chunks))
    reader.start()
    try:
        proc = subprocess.run([sys.executable, "-m", "initgen.cli", *map(str, argv)], stdin=subprocess.DEVNULL,
                              stdout=subprocess.PIPE, stderr=slave, env=env, timeout=300)
    finally:
        os.close(slave)
        reader.join(timeout=30)
        os.close(master)
    return proc.returncode, proc.stdout.decode(), b"".join(chunks).decode()


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    d = tmp_path_factory.mktemp("bar")
    regular(d / "in.nc")
    (d / "r.yaml").write_text(RECIPE)
    return d


def _apply(work, out, *extra):
    return ["apply", work / "r.yaml", "--input", work / "in.nc", "--output", work / out, *extra]


def test_pty_without_a_size_reports_none():
    """The premise: a fresh pty reports 0 columns and 0 rows (the case tqdm alone draws nothing in)."""
    master, slave = _open_pty(None)
    try:
        assert tuple(os.get_terminal_size(slave)) == (0, 0)
    finally:
        os.close(slave)
        os.close(master)


@pytest.fixture(scope="module")
def piped(work):
    """The same apply with stderr on a pipe: no bar."""
    run = subprocess.run([sys.executable, "-m", "initgen.cli", *map(str, _apply(work, "pipe.nc"))],
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0 and "blocks" not in run.stderr and "#" not in run.stderr, run.stderr
    return work / "pipe.nc"


@pytest.mark.parametrize("size", [(24, 80), None], ids=["80x24", "no-size"])
def test_apply_draws_the_bar_on_a_terminal(work, piped, size):
    out = work / f"out-{'sized' if size else 'unsized'}.nc"
    code, stdout, term = run_on_pty(_apply(work, out.name), size)
    assert code == 0, term
    shown = screen(term)
    assert len(shown) == 1 and re.fullmatch(re.escape(FULL) + r" (\d+)/\1 blocks", shown[0]), shown
    assert term.endswith("\n")  # the final newline: the next line starts at the left margin
    assert f"wrote {out}" in stdout  # the bar goes to stderr only
    # the bar changes no value: the same values as stored, variable by variable, as with stderr on a
    # pipe (the files differ in the history line only, which names the output)
    with netCDF4.Dataset(work / "in.nc") as ds:
        names = list(ds.variables)
    for name in names:
        assert np.array_equal(read_raw(out, name), read_raw(piped, name)), name
    assert any(not np.array_equal(read_raw(work / "in.nc", n), read_raw(out, n)) for n in names)


def test_quiet_draws_nothing(work):
    code, stdout, term = run_on_pty(_apply(work, "quiet.nc", "-q"), (24, 80))
    assert code == 0 and term == "" and stdout == ""


def test_ensemble_members_on_a_terminal(work):
    (work / "e.yaml").write_text(RECIPE + "members:\n  scales: [1.0]\n  signs: [1, -1]\n")
    code, _, term = run_on_pty(["apply", work / "e.yaml", "--input", work / "in.nc", "--output", work / "ens",
                                "--workers", "1"])
    assert code == 0, term
    assert screen(term) == [FULL + " 2/2 members done"]


def _on_pty(calls, then=None, size=(24, 80), unit="members done", refresh=False):
    """Feed ``calls`` to one progress line writing to a pty (``refresh``: draw the last state now,
    not after tqdm's minimum interval); ``then``: stop the line as an error does and write that
    line after it. Returns the screen."""
    master, slave = _open_pty(size)
    stream = os.fdopen(slave, "w", encoding="utf-8")
    chunks: list[bytes] = []
    reader = threading.Thread(target=_drain, args=(master, chunks))
    reader.start()
    try:
        bar = _Progress(stream, unit)
        for args in calls:
            bar(*args)
        if refresh:
            bar.bar.refresh()
        if then is not None:
            bar.close(finished=False)
            stream.write(then + "\n")
            stream.flush()
    finally:
        stream.close()
        reader.join(timeout=30)
        os.close(master)
    return screen(b"".join(chunks).decode())


def test_failed_members_are_counted():
    shown = _on_pty([(1, 4, 0), (2, 4, 1), (3, 4, 1), (4, 4, 2)])
    assert shown == [FULL + " 4/4 members done, 2 failed"]


def test_a_stopped_bar_leaves_no_text_before_the_error_line():
    """An error half-way: the partial bar is wiped, the error line stands alone on the screen."""
    shown = _on_pty([(1, 4, 0), (2, 4, 1)], then="initgen: error: something went wrong")
    assert shown == ["initgen: error: something went wrong"]


def test_narrow_terminal_never_wraps():
    """A terminal narrower than the line: the bar gives way so that the counts still show, and the
    line stays within the width less one (never wrapped)."""
    shown = _on_pty([(1, 2, 0), (2, 2, 1)], size=(24, 40))
    assert shown == ["[" + "#" * 10 + "] 2/2 members done, 1 failed"]
    assert len(shown[0]) == 39


def test_partial_bar_shows_the_fraction():
    """3 of 10: 9 of the 30 cells filled (tqdm's bar: int(30 x 3/10) full cells)."""
    assert _on_pty([(3, 10)], unit="blocks", refresh=True) == ["[" + "#" * 9 + "." * 21 + "] 3/10 blocks"]


def test_a_pipe_gets_no_bar(tmp_path):
    """stderr not a terminal: no callback at all (the API then reports nothing)."""
    with open(tmp_path / "err.txt", "w") as f:
        old, sys.stderr = sys.stderr, f
        try:
            with _progress(False, "blocks") as progress:
                assert progress is None
        finally:
            sys.stderr = old
    assert Path(tmp_path / "err.txt").read_text() == ""
