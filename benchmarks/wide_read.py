"""Peak memory and time of ``fitladder run`` on a very wide table (default 10,000 columns).

Writes an invented table of ``--columns`` numeric columns ``c00000...`` plus a
target ``y`` (``--rows`` rows) as CSV and Parquet (and, smaller, as .xlsx),
then runs ``fitladder run <file> --target y`` in a child process for each:
without ``--inputs`` (every numeric column is a default input, so the request
is refused as too large) and with ``--inputs`` naming three columns (the run
goes through). Each child's peak resident memory is read with ``os.wait4``
(``ru_maxrss``; it includes the interpreter and its libraries, about 150 MB).

Usage::

    .venv/bin/python benchmarks/wide_read.py [--columns 10000] [--rows 1000] [--keep DIR]

Prints one line per case: file, case, exit status, peak MB, seconds, and the
last line the command printed on stderr.
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]


def make_table(rows: int, columns: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    X = np.round(rng.normal(size=(rows, columns)), 4)
    frame = pd.DataFrame(X, columns=[f"c{j:05d}" for j in range(columns)])
    frame["y"] = np.round(1 + 2 * X[:, 0] - X[:, 1] + rng.normal(0, 0.1, rows), 4)
    return frame


def run_child(argv: list[str]) -> tuple[int, float, float, str]:
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    start = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "engine", *argv], stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, env=env, cwd=REPO)
    err = proc.stderr.read().decode("utf-8", "replace")
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    seconds = time.perf_counter() - start
    last = err.strip().splitlines()[-1] if err.strip() else ""
    return proc.returncode, usage.ru_maxrss / 1024.0, seconds, last


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--columns", type=int, default=10_000)
    parser.add_argument("--rows", type=int, default=1_000)
    parser.add_argument("--xlsx-rows", type=int, default=50)
    parser.add_argument("--keep", type=Path, default=None)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        where = args.keep or Path(tmp)
        where.mkdir(parents=True, exist_ok=True)
        frame = make_table(args.rows, args.columns)
        files = [where / "wide.csv", where / "wide.parquet"]
        if not files[0].exists():
            frame.to_csv(files[0], index=False)
        if not files[1].exists():
            frame.to_parquet(files[1], index=False)
        if args.xlsx_rows:
            files.append(where / "wide.xlsx")
            if not files[2].exists():
                frame.head(args.xlsx_rows).to_excel(files[2], index=False)
        print(f"{args.columns:,} columns; {args.rows:,} rows (xlsx {args.xlsx_rows}); "
              f"load average {os.getloadavg()[0]:.2f}")
        for path in files:
            size = path.stat().st_size / 2**20
            for case, extra in (("default inputs", []),
                                ("three inputs", ["--inputs", "c00000,c00001,c00002",
                                                  "--max-order", "2", "--penalties", "0,0.1"])):
                out = where / f"pack_{path.suffix[1:]}_{len(extra)}"
                code, peak, seconds, last = run_child(
                    ["run", str(path), "--target", "y", *extra, "--out", str(out),
                     "--overwrite"])
                print(f"{path.name} ({size:.0f} MB) | {case:14s} | exit {code} | "
                      f"peak {peak:6.0f} MB | {seconds:6.1f} s | {last[:110]}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
