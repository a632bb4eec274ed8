"""Whole-process time of ``fitladder run`` on the 24-row calibration demo.

Runs the command three times as a new process each (imports included, as a
user waits for them), writes the pack to a temporary folder and prints each
wall-clock time (with the CPU time of the command and its child processes, which
a busy shared machine inflates less) and their median. Target on a 2-core
machine: 3 s or less.

Usage::

    .venv/bin/python benchmarks/cli_small.py [--runs 3]

Last line: ``cli_small_median <seconds>s``.
"""
from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=3)
    args = ap.parse_args()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    times = []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(args.runs):
            cmd = [sys.executable, "-m", "engine", "run",
                   str(REPO / "demo_data" / "calibration_curve.csv"), "--target", "bath_temp_C",
                   "--out", str(Path(tmp) / f"pack{i}")]
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            t = time.perf_counter()
            proc = subprocess.run(cmd, env=env, cwd=REPO, capture_output=True, text=True)
            times.append(time.perf_counter() - t)
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            if proc.returncode != 0:
                raise SystemExit(f"fitladder run failed: {proc.stderr}")
            cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
            print(f"run {i + 1}: {times[-1]:.2f} s wall, {cpu:.2f} s CPU (all processes; "
                  f"load average {os.getloadavg()[0]:.1f})")
    print(f"cli_small_median {statistics.median(times):.2f}s")


if __name__ == "__main__":
    main()
