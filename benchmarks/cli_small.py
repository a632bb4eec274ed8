"""Whole-process time of ``fitladder run`` on the 24-row calibration demo.

Runs the command three times as a new process each (imports included, as a
user waits for them), writes the pack to a temporary folder and prints each
wall-clock time (with the CPU time of the command and its child processes, which
a busy shared machine inflates less) and their median. Target on a 2-core
machine: 3 s or less.

Python's bytecode cache is on for the command, as for an installed program,
even when this shell sets ``PYTHONDONTWRITEBYTECODE`` (then every run would
compile the engine's modules again, about 0.25 s of CPU); one untimed run
first fills it. ``--no-bytecode-cache`` measures the other way.

Usage::

    .venv/bin/python benchmarks/cli_small.py [--runs 3] [--no-bytecode-cache]

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
    ap.add_argument("--no-bytecode-cache", action="store_true",
                    help="compile the modules in every run (PYTHONDONTWRITEBYTECODE=1)")
    args = ap.parse_args()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    if args.no_bytecode_cache:
        env["PYTHONDONTWRITEBYTECODE"] = "1"
    else:
        env.pop("PYTHONDONTWRITEBYTECODE", None)
    print(f"bytecode cache {'off' if args.no_bytecode_cache else 'on'}")
    times = []
    with tempfile.TemporaryDirectory() as tmp:
        def command(name: str) -> list[str]:
            return [sys.executable, "-m", "engine", "run",
                    str(REPO / "demo_data" / "calibration_curve.csv"), "--target", "bath_temp_C",
                    "--out", str(Path(tmp) / name)]

        if not args.no_bytecode_cache:  # untimed: fills the cache after an edit
            subprocess.run(command("warm"), env=env, cwd=REPO, capture_output=True)
        for i in range(args.runs):
            cmd = command(f"pack{i}")
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
