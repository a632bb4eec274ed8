"""The front of ``fitladder run`` on a large table, step by step, in one process.

Runs the command line's own steps up to the first summaries of the rows:
read (header sample, then the chosen columns), default-input screen,
prepare, then the design and the one row pass of the sweep
(`engine.analysis.sweep_learning_pieces`), and prints the wall, user and
system CPU seconds of each, with the load average. Start-up imports are not
counted (they are timed by ``benchmarks/cli_small.py``).

With ``--intervals`` the sweep as the command line runs it
(`engine.analysis.analyse`, which makes that row pass again) and the
intervals of the recommended cell (`engine.intervals.how_sure`, the second
pass over the rows) follow, each timed on its own. Large arrays are on
ordinary pages, as the command line has them (`engine.cli._small_pages`).

Usage::

    .venv/bin/python benchmarks/front_scale.py [--data FILE] [--rows 1000000] [--intervals]

Without ``--data`` the invented plant log of ``benchmarks/pack_scale.py`` is
written to a temporary folder first (``--rows`` rows).
"""
from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))


class Clock:
    """Wall, user and system seconds (all threads) and page faults between calls."""

    def __init__(self) -> None:
        self.rows: list[tuple[str, float, float, float, float]] = []
        self._last = self._now()

    @staticmethod
    def _now() -> tuple[float, float, float, float]:
        r = resource.getrusage(resource.RUSAGE_SELF)
        return time.perf_counter(), r.ru_utime, r.ru_stime, r.ru_minflt / 1000.0

    def lap(self, name: str) -> None:
        now = self._now()
        self.rows.append((name, *(a - b for a, b in zip(now, self._last))))
        self._last = now


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--data", default=None, help="CSV file (default: an invented one)")
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--intervals", action="store_true",
                    help="also time the sweep and the intervals (the second pass)")
    args = ap.parse_args()

    import numpy as np  # noqa: F401 - imported before the clock starts

    from engine import analysis, cli, loading, sweep  # noqa: F401
    from engine.analysis import make_basis, plan_for, sweep_learning_pieces

    cli._small_pages()

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(args.data) if args.data else Path(tmp) / f"plant_{args.rows}.csv"
        if not path.exists():
            sys.path.insert(0, str(REPO / "benchmarks"))
            from pack_scale import make_table
            make_table(args.rows).to_csv(path, index=False)
        argv = ["run", str(path), "--target", "yield_pct", "--max-order", "6", "--folds", "5",
                "--out", str(Path(tmp) / "pack")]
        ns = cli.build_parser().parse_args(argv)
        penalties = cli._penalty_grid(ns)
        quiet = lambda *a, **k: None  # noqa: E731
        quiet_progress = quiet
        load_before = os.getloadavg()
        clock = Clock()
        # the command line's read: header sample, then the chosen columns, then
        # the default-input screen (`engine.cli._load_for_request`)
        screen = cli._default_inputs

        def timed_screen(*a, **k):
            clock.lap("read")
            return screen(*a, **k)

        cli._default_inputs = timed_screen
        loaded, inputs, left = cli._load_for_request(ns, None, penalties, (), quiet_progress)
        clock.lap("default-input screen")
        data = cli._prepare(loaded.frame, (ns.target,), inputs)
        clock.lap("prepare")
        from engine.spec import SchemeSpec, SweepSpec
        spec = SweepSpec(target=data.target, inputs=tuple(data.inputs), max_order=6,
                         penalties=penalties, scheme=SchemeSpec(kind="kfold", folds=5),
                         seed=ns.seed)
        basis = make_basis(data, spec)
        plan = plan_for(data, spec.scheme, spec.seed)
        clock.lap("design basis + plan")
        sweep_learning_pieces(basis, data, plan, spec, quiet)
        clock.lap("row pass")
        if args.intervals:
            from engine.intervals import how_sure
            done = analysis.analyse(data, spec)
            clock.lap("sweep (analyse)")
            how_sure(done, data, spec)
            clock.lap("intervals (how_sure)")
        sha = loaded.report.sha256
        clock.lap("fingerprint wait")
    load_after = os.getloadavg()
    print(f"{path.name}: {data.n_rows:,} rows x {len(data.inputs)} inputs; "
          f"sha256 {sha[:12]}; left out {sorted(left)}")
    print(f"{'step':<24s} {'wall s':>8s} {'user s':>8s} {'sys s':>8s} {'faults/1000':>12s}")
    tot = [0.0, 0.0, 0.0, 0.0]
    for name, *vals in clock.rows:
        print(f"{name:<24s} {vals[0]:8.2f} {vals[1]:8.2f} {vals[2]:8.2f} {vals[3]:12.1f}")
        tot = [a + b for a, b in zip(tot, vals)]
    print(f"{'total':<24s} {tot[0]:8.2f} {tot[1]:8.2f} {tot[2]:8.2f} {tot[3]:12.1f}")
    print(f"load average before {load_before[0]:.2f}, after {load_after[0]:.2f}")


if __name__ == "__main__":
    main()
