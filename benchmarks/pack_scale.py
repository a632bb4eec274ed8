"""End-to-end ``fitladder run`` on a large table: time of each step against a plain read.

Writes an invented plant log (one input acting as a polynomial of order 6, 19
more inputs acting linearly, noise) as CSV, runs ``fitladder run`` on it as a
separate process (orders 0-6, ridge grid, 5 shuffled folds) and times each
step from the progress lines the command prints on stderr. In the same run it
times ``pandas.read_csv(engine="pyarrow")`` of the same file three times, each
in a new process as the run is (the read alone, not the imports), and takes
the median (one read's time varies by up to 2x between runs here).

Usage::

    .venv/bin/python benchmarks/pack_scale.py [--rows 100000 1000000] [--keep DIR]

Last line: ``pack_over_read <ratio>`` = whole ``fitladder run`` time / read
time, for the largest row count.
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]
#: reads of the file with pandas' pyarrow engine; their median is the denominator
READS = 3

#: progress messages (prefix) -> step name
STEPS = [
    ("Reading", "read"), ("Preparing", "prepare"), ("fitladder: request", "design and row pass"),
    ("Summarising", "sweep"),
    ("Fitting order", "sweep"), ("Leave-one-out", "sweep"),
    ("Fitting the compared", "side-by-side fits"), ("Learning curve", "learning curve"),
    ("Intervals", "intervals"), ("Outlook", "larger-table outlook"),
    ("Checks", "checks"), ("Check", "checks"), ("Drawing", "charts (built; drawn in background)"),
    ("Drawn", "charts"), ("Looking", "checks"), ("Comparing", "checks"), ("Probing", "checks"),
    ("Computing", "checks"), ("Counting", "checks"),
    ("Writing", "model file, waiting for charts, write files"), ("Pack written", "done"),
]


def step_of(message: str) -> str:
    for prefix, name in STEPS:
        if message.startswith(prefix):
            return name
    return "checks" if "check" in message.lower() else message.split(" ")[0].lower()


def make_table(rows: int, seed: int = 0) -> pd.DataFrame:
    """Invented plant log: x01 acts through a sixth-order polynomial, x02..x20 linearly."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(-1, 1, size=(rows, 20))
    x = X[:, 0]
    y = 1 + 2 * x - 3 * x ** 2 + 0.5 * x ** 3 + 1.5 * x ** 4 - 0.8 * x ** 6
    y = y + X[:, 1:] @ rng.normal(size=19) + rng.normal(0, 0.3, rows)
    frame = pd.DataFrame(X, columns=[f"x{j + 1:02d}" for j in range(20)])
    frame["yield_pct"] = y
    return frame


_READ = ("import sys, time\nimport pandas as pd\nt = time.perf_counter()\n"
         "pd.read_csv(sys.argv[1], engine='pyarrow')\nprint(time.perf_counter() - t)")


def fresh_read(path: Path) -> float:
    """Seconds of ``pandas.read_csv(path, engine="pyarrow")`` in a new Python process
    (the read alone, not the imports)."""
    out = subprocess.run([sys.executable, "-c", _READ, str(path)], capture_output=True,
                         text=True, check=True)
    return float(out.stdout.strip())


def run_once(path: Path, out: Path) -> tuple[float, dict[str, float]]:
    cmd = [sys.executable, "-m", "engine", "run", str(path), "--target", "yield_pct",
           "--max-order", "6", "--folds", "5", "--out", str(out)]
    env = dict(os.environ, PYTHONPATH=str(REPO))
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
                            env=env, cwd=REPO)
    steps: dict[str, float] = {}
    last_t, last_step = t0, "start-up (imports)"
    for line in proc.stderr:
        now = time.perf_counter()
        msg = line.split("]", 1)[-1].strip() if line.startswith("[") else line.strip()
        steps[last_step] = steps.get(last_step, 0.0) + now - last_t
        last_t, last_step = now, step_of(msg)
        if not line.startswith("["):
            print("   stderr:", line.rstrip())
    proc.wait()
    end = time.perf_counter()
    steps[last_step] = steps.get(last_step, 0.0) + end - last_t
    if proc.returncode != 0:
        raise SystemExit(f"fitladder run failed ({proc.returncode}): {proc.stdout.read()}")
    print("   " + proc.stdout.read().strip().replace("\n", "\n   "))
    return end - t0, steps


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--keep", default=None, help="folder for the data and packs (default: temp)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(args.keep or tmp)
        base.mkdir(parents=True, exist_ok=True)
        ratio = float("nan")
        for rows in args.rows:
            path = base / f"plant_{rows}.csv"
            if not path.exists():
                make_table(rows).to_csv(path, index=False)
            size_mb = path.stat().st_size / 1e6
            # each read in a fresh process, as the run is: a process's first read also
            # pays for fresh memory, which later reads in the same process reuse
            reads = [fresh_read(path) for _ in range(READS)]
            read_s = statistics.median(reads)
            total, steps = run_once(path, base / f"pack_{rows}")
            print(f"rows {rows} ({size_mb:.0f} MB): pandas pyarrow read {read_s:.2f} s (median "
                  f"of {', '.join(f'{r:.2f}' for r in reads)}); fitladder run {total:.2f} s "
                  f"(load average before the run {os.getloadavg()[0]:.1f})")
            for name, sec in steps.items():
                print(f"   {name:<22s} {sec:8.2f} s")
            ratio = total / read_s
            print(f"   ratio {ratio:.1f}")
        print(f"pack_over_read {ratio:.2f}")


if __name__ == "__main__":
    main()
