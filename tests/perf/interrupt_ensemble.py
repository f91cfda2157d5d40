"""The issue's 'done when' at full size: a 20-member ensemble of a few-hundred-MB file, stopped
by SIGTERM at a known point, then finished with --resume.

Run from the repository root::

    /work/venv/bin/python tests/perf/interrupt_ensemble.py [--mb 150] [--keep DIR]

The input is ``tests/filemaker.regular`` on a fine global grid (5 soil layers, float32), sized to
about ``--mb`` MB. The members 8 and 9 stall at their first block (the slow-down hook of
tests/outputs/test_ensemble_interrupts.py); once both stall, with 7 members done, the parent
gets SIGTERM. The script checks what that test checks on a small file (exit 130 and one line;
'ok' rows are exactly the member files on disk, with matching sha256; no temporaries, locks or
stop file; the workers gone), then runs ``--resume`` and checks the manifest is complete and the
7 finished members were kept untouched. Prints ``name: value`` lines (sizes, seconds).
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent), str(HERE.parent.parent)]

import test_faults as tf  # noqa: E402  (the hook, the recipe and the checks of the suite)
from filemaker import regular  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--mb", type=float, default=150.0, help="payload in MB (default 150: a file of about 200 MB)")
    ap.add_argument("--keep", help="work in this folder and keep it")
    a = ap.parse_args()
    work = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="initgen-interrupt-"))
    work.mkdir(parents=True, exist_ok=True)
    try:
        cells = a.mb * 1e6 / (4 * 5 + 4)  # tsoil (5 layers) + landfrac, float32
        nlat = int((cells / 2) ** 0.5)
        nlon = 2 * nlat
        t = time.perf_counter()
        regular(work / "in.nc", nlon=nlon, nlat=nlat, lon0=-180.0 - 5.0)  # cell centres from -180
        print(f"input_mb: {(work / 'in.nc').stat().st_size / 1e6:.0f}")
        print(f"input_grid: {nlon} x {nlat}")
        print(f"make_input_s: {time.perf_counter() - t:.1f}")
        t = time.perf_counter()
        proc, out, err, pids, names, stalled = tf.interrupt_ensemble(work, 20, 7, signal.SIGTERM)
        print(f"interrupted_run_s: {time.perf_counter() - t:.1f}")
        assert proc.returncode == 130, err
        assert len(err.splitlines()) == 1 and "7 of 20 member output(s) done" in err and "--resume" in err, err
        assert not [p for p in pids if tf.alive(p)], "a worker outlived the parent"
        manifest, on_disk, leftovers = tf.ensemble_state(work / "ens")
        assert manifest["counts"]["ok"] == 7 and len(on_disk) == 7 and leftovers == [], (manifest["counts"], leftovers)
        before = {p: os.stat(p).st_mtime_ns for p in on_disk}
        t = time.perf_counter()
        env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(HERE.parent.parent), os.environ.get("PYTHONPATH", "")]))
        res = subprocess.run([sys.executable, "-m", "initgen.cli", "apply", str(work / "ens.yaml"), "--input",
                              str(work / "in.nc"), "--output", str(work / "ens"), "--resume", "--workers", "2"],
                             capture_output=True, text=True, env=env)
        print(f"resume_run_s: {time.perf_counter() - t:.1f}")
        assert res.returncode == 0, res.stderr
        assert "20 of 20 output(s) written (7 kept from an earlier run)" in res.stdout, res.stdout[-400:]
        manifest, on_disk, leftovers = tf.ensemble_state(work / "ens")
        assert manifest["counts"]["ok"] == 20 and leftovers == []
        assert {p: os.stat(p).st_mtime_ns for p in before} == before, "a kept member was rewritten"
        print("interrupt_and_resume: ok")
        return 0
    finally:
        if not a.keep:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
