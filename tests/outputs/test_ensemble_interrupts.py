"""Ensembles interrupted by a real signal (Ctrl-C to the group, SIGINT/SIGTERM/SIGHUP to the
parent, a Dask cluster's run stopped), then resumed; an unreachable scheduler.

The promise is the writer's (README, "What initgen guarantees"), for every member: the members
finished before the signal are kept, each with its record and the sha256 the manifest states,
the workers stop, nothing half-written is left, and ``--resume`` completes the manifest. The
runs are stalled at a known point (a worker writing a chosen member touches a marker file and
waits), as in ``tests/test_faults.py``, not after a guessed sleep.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from initgen.io import atomic
from initgen.io.atomic import _pid_alive
from initgen.cli import main

from clikit import sha
from clikit import tapered_recipe_text
from clikit import names, wait_for
from clikit import one_error_line as _one_error_line

RECIPE = tapered_recipe_text("faults")

# ---------------------------------------------------------------------------------------------
# Ensembles: interrupted by a real signal, then resumed
# ---------------------------------------------------------------------------------------------

# The CLI with initgen.engine.plan.apply_block slowed down for the members named in argv[1] (comma
# separated): a worker writing one of them touches marker-<member> (holding its process id) after
# its first block and waits there (up to 120 s) for GO; the others run at full speed. With two
# workers and the stalled members right after the first k, the run is interrupted at a known
# point: exactly k members done, two being written.
ENSEMBLE_RUNNER = textwrap.dedent("""\
    import os, sys, time
    from pathlib import Path
    from initgen.engine import plan
    stall, folder = set(sys.argv[1].split(",")), Path(sys.argv[2])
    original = plan.apply_block

    def slow(plan_, store, *args, **kw):
        original(plan_, store, *args, **kw)
        member = Path(str(getattr(store, "path", ""))).parent.name
        marker = folder / f"marker-{member}"
        if kw.get("write") and member in stall and not marker.exists():
            part = folder / f"part-{member}"
            part.write_text(str(os.getpid()))
            os.replace(part, marker)  # the test reads the pid as soon as the marker exists
            deadline = time.monotonic() + 120
            while not (folder / "GO").exists() and time.monotonic() < deadline:
                time.sleep(0.02)

    plan.apply_block = slow
    from initgen.cli import main
    sys.exit(main(sys.argv[3:]))
""")


def ensemble_recipe(n: int) -> str:
    scales = ", ".join(str(round(0.1 * (k + 1), 1)) for k in range(n // 2))
    return RECIPE.replace("name: faults", "name: faults-ensemble\nseed: 5") + (
        f"members:\n  scales: [{scales}]\n  signs: [1, -1]\n")


def alive(pid: int) -> bool:
    """A process that still runs (a zombie waiting for its parent to reap it has stopped)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (FileNotFoundError, ProcessLookupError):
        return False
    except OSError:
        return _pid_alive(pid)
    return state not in ("Z", "X")


def ensemble_state(folder: Path, running: bool = False):
    """(manifest, member files on disk, leftovers): the files the manifest lists 'ok' must be
    exactly the member outputs on disk, each with the recorded sha256 and its provenance record.
    While the run goes on (``running``) a member may be on disk a moment before its row says
    'ok'; its row must then say 'pending'."""
    manifest = json.loads((folder / "manifest.json").read_text())
    ok = {r["output"]: r["output_sha256"] for r in manifest["outputs"] if r["status"] == "ok"}
    pending = {r["output"] for r in manifest["outputs"] if r["status"] == "pending"}
    on_disk = {str(p) for p in folder.rglob("*.nc")}
    records = {str(p)[: -len(".provenance.json")] for p in folder.rglob("*.provenance.json")}
    leftovers = sorted(p.name for p in folder.rglob("*") if p.name.endswith(
        (atomic.TMP_TAG, atomic.LOCK_TAG, ".repack")) or p.name == ".initgen-stop")
    if running:
        assert set(ok) <= on_disk and on_disk - set(ok) <= pending, (sorted(ok), sorted(on_disk))
        on_disk &= set(ok)
        records &= set(ok)
    else:
        assert not pending, pending
    assert set(ok) == on_disk == records, (sorted(ok), sorted(on_disk), sorted(records))
    for path, digest in ok.items():
        assert sha(path) == digest, path
    return manifest, on_disk, leftovers


def start_ensemble(work, n, stalled, *extra, group=False):
    (work / "ens.yaml").write_text(ensemble_recipe(n))
    (work / "ens_runner.py").write_text(ENSEMBLE_RUNNER)
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).parent) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    cmd = [sys.executable, str(work / "ens_runner.py"), ",".join(stalled), str(work), "apply", str(work / "ens.yaml"),
           "--input", str(work / "in.nc"), "--output", str(work / "ens"), "--workers", "2", *extra]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=work,
                            start_new_session=group)


def interrupt_ensemble(work, n, k, how):
    """Run an n-member ensemble, stop it by ``how`` while members k and k+1 are being written."""
    from initgen.outputs import ensemble
    from initgen.outputs.members import members
    from initgen.config.recipe import load_recipe

    (work / "ens.yaml").write_text(ensemble_recipe(n))
    names_ = [m.name for m in members(load_recipe(work / "ens.yaml"))]
    stalled = names_[k:k + 2]
    proc = start_ensemble(work, n, stalled, group=(how == "group"))
    for m in stalled:
        wait_for(work / f"marker-{m}", proc, timeout=120)
    pids = [int((work / f"marker-{m}").read_text()) for m in stalled]
    # mid-run, the manifest on disk is true at every moment; once the parent has heard of the
    # k members done, it lists exactly them as 'ok'
    deadline = time.monotonic() + 60
    while True:
        manifest, on_disk, _ = ensemble_state(work / "ens", running=True)
        if manifest["counts"]["ok"] == k or time.monotonic() > deadline:
            break
        time.sleep(0.05)
    assert manifest["counts"]["ok"] == k and len(on_disk) == k
    assert len(list((work / "ens").rglob(f".in.nc.*{atomic.TMP_TAG}"))) == 2  # two members mid-write
    if how == "group":
        os.killpg(proc.pid, signal.SIGINT)  # Ctrl-C in a terminal: the whole process group
    else:
        proc.send_signal(how)  # the parent alone (a batch system's SIGTERM, a closed session's SIGHUP)
    out, err = proc.communicate(timeout=120)
    return proc, out, err, pids, names_, stalled


@pytest.mark.parametrize("how", ["group", signal.SIGINT, signal.SIGTERM, signal.SIGHUP],
                         ids=["SIGINT-group", "SIGINT-parent", "SIGTERM-parent", "SIGHUP-parent"])
def test_interrupted_ensemble_keeps_finished_members_and_stops_its_workers(work, how):
    src = sha(work / "in.nc")
    proc, out, err, pids, names_, stalled = interrupt_ensemble(work, 6, 2, how)
    assert proc.returncode == 130, err
    lines = err.splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith("initgen: interrupted (SIG") and "2 of 6 member output(s) done" in lines[0]
    assert "--resume" in lines[0] and "manifest.json" in lines[0]
    # the workers are gone (no orphan goes on writing), nothing half-written is left
    assert not [p for p in pids if alive(p)], pids
    time.sleep(0.5)
    manifest, on_disk, leftovers = ensemble_state(work / "ens")
    assert leftovers == [] and len(on_disk) == 2
    assert manifest["counts"] == {"outputs": 6, "ok": 2, "failed": 0, "not_run": 4, "pending": 0}
    # no empty member folders from the members that were stopped
    assert sorted(p.name for p in (work / "ens").iterdir() if p.is_dir()) == sorted(names_[:2])
    assert {r["member"]["name"] for r in manifest["outputs"] if r["status"] == "ok"} == set(names_[:2])
    assert all("--resume" in r["message"] for r in manifest["outputs"] if r["status"] != "ok")
    assert sha(work / "in.nc") == src


def test_interrupted_20_member_ensemble_resumes_to_a_complete_manifest(work, capsys):
    """The issue's 'done when' on a small file (the few-hundred-MB case: tests/perf/interrupt_ensemble.py)."""
    src = sha(work / "in.nc")
    proc, out, err, pids, names_, stalled = interrupt_ensemble(work, 20, 7, signal.SIGTERM)
    assert proc.returncode == 130 and "7 of 20 member output(s) done" in err, err
    manifest, on_disk, leftovers = ensemble_state(work / "ens")
    assert leftovers == [] and manifest["counts"]["ok"] == 7
    before = {p: (sha(p), os.stat(p).st_mtime_ns) for p in on_disk}
    # a plain re-run is refused, naming both ways on
    argv = ["apply", str(work / "ens.yaml"), "--input", str(work / "in.nc"), "--output", str(work / "ens")]
    assert main(argv) == 2
    msg = capsys.readouterr().err
    assert "--resume" in msg and "--force" in msg
    # --resume keeps the seven (untouched, and says so) and writes the thirteen others
    assert main(argv + ["--resume", "--workers", "2"]) == 0
    text = capsys.readouterr().out
    assert "20 of 20 output(s) written (7 kept from an earlier run)" in text
    assert text.count("(kept: written earlier, matches its record)") == 7
    manifest, on_disk, leftovers = ensemble_state(work / "ens")
    assert manifest["counts"] == {"outputs": 20, "ok": 20, "failed": 0, "not_run": 0, "pending": 0} and leftovers == []
    assert {p: (sha(p), os.stat(p).st_mtime_ns) for p in before} == before
    kept = [r for r in manifest["outputs"] if r["message"].startswith("kept")]
    assert sorted(r["member"]["name"] for r in kept) == sorted(names_[:7])
    assert sha(work / "in.nc") == src
    # every member, kept or new, verifies on its own
    from initgen.reports.verify import verify

    for r in manifest["outputs"][6:9]:
        assert verify(r["output"] + ".provenance.json")["ok"]


def test_resume_rewrites_a_member_that_no_longer_matches_its_record(work, capsys):
    (work / "ens.yaml").write_text(ensemble_recipe(4))
    argv = ["apply", str(work / "ens.yaml"), "--input", str(work / "in.nc"), "--output", str(work / "ens"),
            "--workers", "1"]
    assert main(argv) == 0
    manifest = json.loads((work / "ens" / "manifest.json").read_text())
    first, second = manifest["outputs"][0]["output"], manifest["outputs"][1]["output"]
    with open(first, "r+b") as fh:  # altered after the run: its sha256 no longer matches the record
        fh.seek(-8, os.SEEK_END)
        fh.write(b"\0" * 8)
    Path(second + ".provenance.json").unlink()  # a member without its record is not kept either
    capsys.readouterr()
    assert main(argv + ["--resume"]) == 0
    assert "(2 kept from an earlier run)" in capsys.readouterr().out
    manifest, on_disk, leftovers = ensemble_state(work / "ens")
    assert manifest["counts"]["ok"] == 4 and leftovers == []
    # another recipe's files in the folder are not taken for this one's: refused, naming --force
    (work / "ens.yaml").write_text(ensemble_recipe(4).replace("constant_K: -2", "constant_K: -3"))
    assert main(argv + ["--resume"]) == 2
    err = capsys.readouterr().err
    assert "another recipe" in err and "--force" in err


def test_unreachable_scheduler_creates_nothing(work, capsys, monkeypatch):
    pytest.importorskip("distributed")
    import socket

    from initgen.outputs import ensemble
    from initgen.outputs.members import members

    with socket.socket() as s:  # a local port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    monkeypatch.setattr(ensemble, "CONNECT_TIMEOUT_S", 2)
    (work / "ens.yaml").write_text(ensemble_recipe(2))
    before = names(work)
    assert main(["apply", str(work / "ens.yaml"), "--input", str(work / "in.nc"), "--output", str(work / "ens"),
                 "--scheduler", f"tcp://127.0.0.1:{port}"]) == 2
    line = _one_error_line(capsys)
    assert "--scheduler" in line and "cannot connect" in line and "nothing was written" in line
    assert names(work) == before


# On a Dask worker the hook is a preload script: the worker stalls at the first block of the nth
# member it writes until GO exists, or until the interrupted ensemble's stop file appears.
DASK_PRELOAD = textwrap.dedent("""\
    import os, time
    from pathlib import Path
    from initgen.engine import plan
    folder, nth = Path(os.environ["INITGEN_TEST_FOLDER"]), int(os.environ["INITGEN_TEST_STALL_NTH"])
    seen = []

    def slow(plan_, store, *args, **kw):
        original(plan_, store, *args, **kw)
        member = Path(str(getattr(store, "path", ""))).parent.name
        if kw.get("write") and member not in seen:
            seen.append(member)
            if len(seen) == nth:
                (folder / "marker-dask").write_text(member)
                stop, deadline = folder / "ens" / ".initgen-stop", time.monotonic() + 120
                while not (folder / "GO").exists() and not stop.exists() and time.monotonic() < deadline:
                    time.sleep(0.02)

    slow.stall_hook = True
    if not getattr(plan.apply_block, "stall_hook", False):  # a preload can run twice in one process
        original = plan.apply_block
        plan.apply_block = slow
""")


def test_interrupted_ensemble_on_dask_stops_its_tasks(work, monkeypatch):
    distributed = pytest.importorskip("distributed")
    (work / "preload_stall.py").write_text(DASK_PRELOAD)
    (work / "ens.yaml").write_text(ensemble_recipe(6))
    monkeypatch.setenv("INITGEN_TEST_FOLDER", str(work))
    monkeypatch.setenv("INITGEN_TEST_STALL_NTH", "3")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None,
                                  preload=[str(work / "preload_stall.py")]) as cl:
        proc = subprocess.Popen([sys.executable, "-m", "initgen.cli", "apply", str(work / "ens.yaml"), "--input",
                                 str(work / "in.nc"), "--output", str(work / "ens"), "--scheduler",
                                 cl.scheduler_address], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        wait_for(work / "marker-dask", proc, timeout=120)
        assert len(list((work / "ens").rglob(f".in.nc.*{atomic.TMP_TAG}"))) == 1  # the third member, mid-write
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=120)
        assert proc.returncode == 130, err
        lines = err.splitlines()
        assert len(lines) == 1 and "2 of 6 member output(s) done" in lines[0] and "--resume" in lines[0], lines
        time.sleep(1.0)  # nothing more may appear: the queued tasks returned without writing
        manifest, on_disk, leftovers = ensemble_state(work / "ens")
        assert leftovers == [] and len(on_disk) == 2 and manifest["counts"]["not_run"] == 4
