"""Faults while writing: signals, a full disk, two runs racing for one output, a crashed run;
verify on a moved or copied submission folder, and ``-q``. Ensembles interrupted and resumed are in
``outputs/test_ensemble_interrupts.py``.

Each test checks the writer's promise (README, "What initgen guarantees"): the input is never
modified, and a run that does not finish leaves nothing at the output path, no provenance record
and no temporary or lock file beside it.

The signal and race tests run the real command line in a subprocess whose patch step is slowed
down at a known point (the first block written): the subprocess touches a marker file there and
waits, so the test sends its signal, or starts its rival, at a moment it knows, not after a
guessed sleep.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import netCDF4
import pytest

from initgen.io import atomic
from initgen.io.stores import NetCDFStore
from initgen.cli import main

from filemaker import regular
from clikit import sha
from clikit import tapered_recipe_text
from clikit import names, wait_for
from clikit import one_error_line as _one_error_line

RECIPE = tapered_recipe_text("faults")

# The CLI, with initgen.engine.plan.apply_block slowed down: after the first block it writes, the
# process touches MARKER and waits (up to 60 s) for GO to exist. SIGTERM/SIGINT interrupt the wait.
RUNNER = textwrap.dedent("""\
    import sys, time
    from pathlib import Path
    from initgen.engine import plan
    marker, go = Path(sys.argv[1]), Path(sys.argv[2])
    original = plan.apply_block

    def slow(*args, **kw):
        original(*args, **kw)
        if kw.get("write") and not marker.exists():
            marker.touch()
            deadline = time.monotonic() + 60
            while not go.exists() and time.monotonic() < deadline:
                time.sleep(0.02)

    plan.apply_block = slow
    from initgen.cli import main
    sys.exit(main(sys.argv[3:]))
""")



@pytest.fixture
def work(work):
    """conftest's folder with a small input ``in.nc``, plus the recipe and the slowed CLI."""
    (work / "r.yaml").write_text(RECIPE)
    (work / "runner.py").write_text(RUNNER)
    return work


def start(work, tag, *cli):
    """Start the slowed CLI; return (process, marker, go)."""
    marker, go = work / f"marker-{tag}", work / f"go-{tag}"
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).parent) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, str(work / "runner.py"), str(marker), str(go), *map(str, cli)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=work)
    return proc, marker, go



def apply_args(work, output="out.nc", *extra):
    return ["apply", work / "r.yaml", "--input", work / "in.nc", "--output", work / output, *extra]


def assert_nothing_left(work, before_names, input_sha):
    now = names(work)
    leftovers = {n for n in now if n.endswith(atomic.TMP_TAG) or n.endswith(atomic.LOCK_TAG)}
    assert not leftovers, leftovers
    assert "out.nc" not in now and "out.nc.provenance.json" not in now
    assert now - before_names <= {n for n in now if n.startswith(("marker-", "go-"))}, now - before_names
    assert sha(work / "in.nc") == input_sha


# ---------------------------------------------------------------------------------------------
# Signals
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT, signal.SIGHUP], ids=["SIGTERM", "SIGINT", "SIGHUP"])
def test_signal_during_the_write_leaves_nothing(work, sig):
    before, src = names(work), sha(work / "in.nc")
    proc, marker, _ = start(work, "a", *apply_args(work))
    wait_for(marker, proc)
    # mid-write: the temporary copy exists, the output does not
    assert [n for n in names(work) if n.endswith(atomic.TMP_TAG)]
    assert not (work / "out.nc").exists()
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: interrupted"), lines
    assert_nothing_left(work, before, src)


def test_signal_before_the_write_leaves_nothing(work):
    """SIGTERM while initgen still validates (before the writer installs its handlers)."""
    before, src = names(work), sha(work / "in.nc")
    runner = work / "runner_validate.py"
    runner.write_text(textwrap.dedent("""\
        import sys, time
        from pathlib import Path
        from initgen.engine import plan
        original = plan.build_plan
        def slow(*a, **k):
            Path(sys.argv[1]).touch()
            time.sleep(60)
        plan.build_plan = slow
        from initgen.cli import main
        sys.exit(main(sys.argv[2:]))
    """))
    proc = subprocess.Popen([sys.executable, str(runner), str(work / "marker-v"), *map(str, apply_args(work))],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    wait_for(work / "marker-v", proc)
    proc.send_signal(signal.SIGTERM)
    proc.communicate(timeout=60)
    assert proc.returncode != 0
    assert_nothing_left(work, before | {"runner_validate.py"}, src)


# ---------------------------------------------------------------------------------------------
# A full disk
# ---------------------------------------------------------------------------------------------


def _enospc(*args, **kw):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))



def test_full_disk_while_copying(work, capsys, monkeypatch):
    before, src = names(work), sha(work / "in.nc")
    monkeypatch.setattr(shutil, "copyfile", _enospc)
    assert main([str(a) for a in apply_args(work)]) == 2
    line = _one_error_line(capsys)
    assert "out.nc" in line and "no space left on the device" in line and "free space" in line
    assert_nothing_left(work, before, src)


def test_full_disk_while_patching(work, capsys, monkeypatch):
    before, src = names(work), sha(work / "in.nc")
    real = NetCDFStore.write_changed

    def fail_on_write(self, *a, **k):
        if self.path.name.endswith(atomic.TMP_TAG):  # the copy being patched
            _enospc()
        return real(self, *a, **k)

    monkeypatch.setattr(NetCDFStore, "write_changed", fail_on_write)
    assert main([str(a) for a in apply_args(work)]) == 2
    line = _one_error_line(capsys)
    assert "out.nc" in line and "no space left on the device" in line
    assert_nothing_left(work, before, src)


def test_full_disk_inside_the_netcdf_library(work, capsys, monkeypatch):
    """netCDF-C reports a full disk while writing as RuntimeError('NetCDF: HDF error'), no errno."""
    before, src = names(work), sha(work / "in.nc")
    real = NetCDFStore.write_changed

    def hdf_error(self, *a, **k):
        if self.path.name.endswith(atomic.TMP_TAG):
            raise RuntimeError("NetCDF: HDF error")
        return real(self, *a, **k)

    monkeypatch.setattr(NetCDFStore, "write_changed", hdf_error)
    monkeypatch.setattr(atomic, "_free_bytes", lambda folder: 4096)
    assert main([str(a) for a in apply_args(work)]) == 2
    line = _one_error_line(capsys)
    assert "NetCDF: HDF error" in line and "disk is most likely full" in line and "out.nc" in line
    assert_nothing_left(work, before, src)


def test_full_disk_while_writing_the_provenance_record(work, capsys, monkeypatch):
    before, src = names(work), sha(work / "in.nc")
    real_fsync = os.fsync

    def fsync(fd):
        if os.readlink(f"/proc/self/fd/{fd}").endswith(".json" + f".{os.getpid()}{atomic.TMP_TAG}"):
            _enospc()
        return real_fsync(fd)

    if not Path("/proc/self/fd").exists():
        pytest.skip("needs /proc to tell the record's file descriptor apart")
    monkeypatch.setattr(os, "fsync", fsync)
    assert main([str(a) for a in apply_args(work)]) == 2
    line = _one_error_line(capsys)
    assert "provenance.json" in line and "no space left on the device" in line
    assert_nothing_left(work, before, src)


def test_file_size_limit_in_a_real_process(work):
    """A real write failure from the operating system (RLIMIT_FSIZE -> EFBIG), not a mock."""
    before, src = names(work), sha(work / "in.nc")
    limit = (work / "in.nc").stat().st_size // 2
    code = ("import resource, signal, sys; signal.signal(signal.SIGXFSZ, signal.SIG_IGN); "
            f"resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, {limit})); "
            "from initgen.cli import main; sys.exit(main(sys.argv[1:]))")
    proc = subprocess.run([sys.executable, "-c", code, *map(str, apply_args(work))], capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and "out.nc" in lines[0] and "File too large" in lines[0], lines
    assert_nothing_left(work, before, src)


# ---------------------------------------------------------------------------------------------
# Two runs, one output
# ---------------------------------------------------------------------------------------------


def _valid_output(work, winner_out):
    with netCDF4.Dataset(work / "out.nc") as ds:
        assert ds["tsoil"][:].shape == (1, 5, 18, 36)
        assert "initgen" in ds.history.splitlines()[0]
    rec = json.loads((work / "out.nc.provenance.json").read_text())
    assert rec["output"]["sha256"] == sha(work / "out.nc"), "the record describes another file"
    assert f"sha256 {rec['output']['sha256']}" in winner_out


def test_two_runs_writing_the_same_output(work):
    # the second run uses another anomaly, so that the two outputs differ and a record that
    # describes the wrong one would be caught
    (work / "r2.yaml").write_text(RECIPE.replace("constant_K: -2", "constant_K: 3"))
    before, src = names(work), sha(work / "in.nc")
    first, marker_a, go_a = start(work, "a", *apply_args(work))
    wait_for(marker_a, first)  # the first run is mid-write
    args_b = apply_args(work)
    args_b[1] = work / "r2.yaml"
    second, marker_b, go_b = start(work, "b", *args_b)
    go_b.touch()
    out_b, err_b = second.communicate(timeout=60)
    go_a.touch()
    out_a, err_a = first.communicate(timeout=60)
    assert sorted([first.returncode, second.returncode]) == [0, 2], (err_a, err_b)
    loser_err = err_b if second.returncode == 2 else err_a
    lines = loser_err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("initgen: error: ") and "out.nc" in lines[0]
    assert "another" in lines[0]
    _valid_output(work, out_a if first.returncode == 0 else out_b)
    now = names(work)
    assert not {n for n in now if n.endswith((atomic.TMP_TAG, atomic.LOCK_TAG))}
    assert sha(work / "in.nc") == src
    assert now - before == {"out.nc", "out.nc.provenance.json", "marker-a", "go-a", "go-b"} | (
        {"marker-b"} if marker_b.exists() else set())


def test_two_runs_started_together(work):
    """Both started at once, neither slowed: one file, one clear refusal (or both 0 and 2)."""
    src = sha(work / "in.nc")
    cmd = [sys.executable, "-m", "initgen.cli", *map(str, apply_args(work))]
    procs = [subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for _ in range(2)]
    results = [p.communicate(timeout=120) for p in procs]
    codes = sorted(p.returncode for p in procs)
    assert codes == [0, 2], results
    loser = next(err for p, (out, err) in zip(procs, results) if p.returncode == 2)
    assert len(loser.splitlines()) == 1 and ("another" in loser or "exists; pass --force" in loser), loser
    winner_out = next(out for p, (out, err) in zip(procs, results) if p.returncode == 0)
    _valid_output(work, winner_out)
    assert not {n for n in names(work) if n.endswith((atomic.TMP_TAG, atomic.LOCK_TAG))}
    assert sha(work / "in.nc") == src


def test_another_program_creates_the_output_meanwhile(work):
    """Not initgen: a file appears at the output path while initgen writes. initgen keeps it,
    says so, and leaves no record of its own beside it."""
    src = sha(work / "in.nc")
    proc, marker, go = start(work, "a", *apply_args(work))
    wait_for(marker, proc)
    (work / "out.nc").write_bytes(b"theirs")
    go.touch()
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 2
    assert len(err.splitlines()) == 1 and "another process created this file" in err and "kept theirs" in err
    assert (work / "out.nc").read_bytes() == b"theirs"
    assert not (work / "out.nc.provenance.json").exists()
    assert not {n for n in names(work) if n.endswith((atomic.TMP_TAG, atomic.LOCK_TAG))}
    assert sha(work / "in.nc") == src


# ---------------------------------------------------------------------------------------------
# A crash mid-write is recoverable
# ---------------------------------------------------------------------------------------------


def dead_pid() -> int:
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    return p.pid


def test_rerun_after_a_crash_removes_the_stale_temporary_and_lock(work, capsys):
    src = sha(work / "in.nc")
    pid = dead_pid()
    stale = work / f".out.nc.{pid}{atomic.TMP_TAG}"
    stale.write_bytes((work / "in.nc").read_bytes()[:1000])  # half a copy, as a SIGKILL leaves it
    lock = work / f".out.nc{atomic.LOCK_TAG}"
    lock.write_text(f"{os.uname().nodename} {pid}\n")
    other = work / f".other.nc.{pid}{atomic.TMP_TAG}"  # another output's temporary: not ours to remove
    other.write_bytes(b"x")
    assert main([str(a) for a in apply_args(work, "out.nc", "-q")]) == 0
    assert not stale.exists() and not lock.exists() and other.exists()
    assert sha(work / "in.nc") == src
    with netCDF4.Dataset(work / "out.nc") as ds:
        assert ds["tsoil"].shape == (1, 5, 18, 36)


def test_temporary_of_a_live_run_is_left_alone(work, capsys):
    alive = os.getppid()
    theirs = work / f".out.nc.{alive}{atomic.TMP_TAG}"
    theirs.write_bytes(b"in progress")
    assert main([str(a) for a in apply_args(work, "out.nc", "-q")]) == 0
    assert theirs.read_bytes() == b"in progress"


def test_lock_of_a_live_run_stops_a_second_run(work, capsys):
    before, src = names(work), sha(work / "in.nc")
    lock = work / f".out.nc{atomic.LOCK_TAG}"
    lock.write_text(f"{os.uname().nodename} {os.getppid()}\n")
    assert main([str(a) for a in apply_args(work)]) == 2
    line = _one_error_line(capsys)
    assert "out.nc" in line and "another initgen run is writing this output" in line and "wait for it" in line
    assert lock.exists() and not (work / "out.nc").exists()
    assert names(work) == before | {lock.name} and sha(work / "in.nc") == src




# ---------------------------------------------------------------------------------------------
# verify anywhere: a moved or copied submission folder checks its own files
# ---------------------------------------------------------------------------------------------


def _cli(*argv, cwd=None):
    proc = subprocess.run([sys.executable, "-m", "initgen.cli", *map(str, argv)], capture_output=True, text=True,
                          timeout=120, cwd=cwd)
    return proc.returncode, proc.stdout, proc.stderr


@pytest.fixture
def submission(tmp_path):
    """A submission folder: recipe, input, perturbed output and its record, made with relative paths."""
    sub = tmp_path / "submission"
    sub.mkdir()
    regular(sub / "in.nc")
    (sub / "r.yaml").write_text(RECIPE)
    code, out, err = _cli("apply", "r.yaml", "--input", "in.nc", "--output", "out.nc", "-q", cwd=sub)
    assert code == 0 and out == "" and err == "", err
    return sub


def checked_lines(stdout: str) -> dict:
    """'  checked <what> <path> (<how>)' lines -> {what: line}."""
    return {line.split()[1]: line for line in stdout.splitlines() if line.startswith("  checked ")}


def test_moved_submission_folder_verifies_on_its_own_files(submission, tmp_path):
    moved = tmp_path / "elsewhere" / "moved"
    moved.parent.mkdir()
    shutil.move(str(submission), str(moved))
    code, out, err = _cli("verify", moved / "out.nc.provenance.json")
    assert code == 0 and out.startswith("verified: "), err + out
    lines = checked_lines(out)
    for what in ("input", "output", "recipe"):
        assert str(moved) in lines[what] and "beside the record" in lines[what], lines


def test_copied_submission_is_checked_not_the_original(submission, tmp_path):
    """The original stays where it was; the copy's altered output must be caught (checking the
    original instead would pass)."""
    copy = tmp_path / "copy"
    shutil.copytree(submission, copy)
    code, out, _ = _cli("verify", copy / "out.nc.provenance.json")
    assert code == 0 and all(str(copy) in line for line in checked_lines(out).values()), out
    with netCDF4.Dataset(copy / "out.nc", "r+") as ds:
        v = ds["tsoil"]
        v[0, 0, 9, 5] = v[0, 0, 9, 5] + 1.0
    code, out, _ = _cli("verify", copy / "out.nc.provenance.json")
    assert code == 3 and out.startswith("NOT verified") and str(copy / "out.nc") in out, out
    assert "altered after apply" in out


def test_verify_with_the_recipe_gone_uses_the_recorded_text(submission, tmp_path):
    (submission / "r.yaml").unlink()
    code, out, err = _cli("verify", submission / "out.nc.provenance.json")
    assert code == 0, err + out
    assert "the recipe text stored in the record" in checked_lines(out)["recipe"]
    # the stored text is held to the stored hash: a record whose text was edited is not verified
    rec_path = submission / "out.nc.provenance.json"
    rec = json.loads(rec_path.read_text())
    rec["recipe"]["text"] = rec["recipe"]["text"].replace("constant_K: -2", "constant_K: -3")
    rec_path.write_text(json.dumps(rec))
    code, out, err = _cli("verify", rec_path)
    assert code == 3 and "NOT verified" in out and "recipe text stored in the record" in out, out
    assert "the record was edited after apply" in out


def test_verify_overrides_name_the_files_checked(submission, tmp_path):
    elsewhere = tmp_path / "store"
    elsewhere.mkdir()
    shutil.move(str(submission / "in.nc"), str(elsewhere / "original.nc"))
    shutil.move(str(submission / "r.yaml"), str(elsewhere / "recipe.yaml"))
    code, out, err = _cli("verify", submission / "out.nc.provenance.json")
    assert code == 2 and "the input file is not there" in err and "--input" in err
    code, out, err = _cli("verify", submission / "out.nc.provenance.json", "--input", elsewhere / "original.nc",
                          "--recipe", elsewhere / "recipe.yaml")
    assert code == 0, err + out
    lines = checked_lines(out)
    assert str(elsewhere / "original.nc") in lines["input"] and "(given)" in lines["input"]
    assert str(elsewhere / "recipe.yaml") in lines["recipe"] and "(given)" in lines["recipe"]


# ---------------------------------------------------------------------------------------------
# -q: nothing but errors
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("argv", [
    ["check", "r.yaml", "--input", "in.nc", "-q"],
    ["preview", "r.yaml", "--input", "in.nc", "--json", "l.json", "-q"],
    ["mask", "r.yaml", "--input", "in.nc", "--output", "m.nc", "-q"],
    ["compare", "in.nc", "in.nc", "--json", "c.json", "-q"],
    ["apply", "r.yaml", "--input", "in.nc", "--output", "out.nc", "-q"],
], ids=lambda a: a[0])
def test_quiet_prints_nothing_on_success(work, argv):
    code, out, err = _cli(*argv, cwd=work)
    assert code == 0 and out == "" and err == "", (out, err)
