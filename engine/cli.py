"""Command line: write the meeting pack without the dashboard.

``fitladder run DATA --target COL --out DIR`` sweeps, recommends and writes the
same pack the dashboard's download button gives; ``fitladder rerun
DIR/record.json --out DIR2`` runs a recorded request again on the same file
(checked by SHA-256) and reproduces ``summary.json`` byte for byte.

Exit status: 0 success; 2 bad input or usage (one message on stderr); 1 an
internal error (short message; the traceback only with ``FITLADDER_DEBUG=1``).
"""
from __future__ import annotations

import argparse
import json
import math
import os
import signal
import sys
import threading
import traceback
from pathlib import Path
from typing import NoReturn, Sequence

from .errors import InputProblem
from .lagged import LagSpec
from .labels import DEFAULT_ERROR_UNIT, ERROR_UNITS
from .spec import (DEFAULT_FOLDS, DEFAULT_GAP, DEFAULT_HOLDOUT_FRACTION, DEFAULT_MAX_ORDER,
                   DEFAULT_PENALTY_COUNT, DEFAULT_PENALTY_HIGH, DEFAULT_PENALTY_LOW,
                   DEFAULT_REPEATS, DEFAULT_SEED, SCHEME_HELP, SCHEMES, SELECTION_RULES, SchemeSpec, SweepSpec,
                   default_penalties)

PROG = "fitladder"
DEFAULT_PENALTY_RANGE = (DEFAULT_PENALTY_LOW, DEFAULT_PENALTY_HIGH, DEFAULT_PENALTY_COUNT)

EXIT_OK, EXIT_INTERNAL, EXIT_BAD_INPUT = 0, 1, 2


class UsageProblem(InputProblem):
    """A command-line value that cannot be used (exit status 2)."""


# ---------------------------------------------------------------------------
# option values
# ---------------------------------------------------------------------------
def _names(text: str) -> list[str]:
    return [t.strip() for t in text.split(",") if t.strip()]


def parse_penalty_range(text: str) -> tuple[float, float, int]:
    """``LO:HI:COUNT`` -> (low, high, count); positive LO <= HI, COUNT >= 1."""
    parts = text.split(":")
    if len(parts) != 3:
        raise argparse.ArgumentTypeError(
            f"'{text}' is not LO:HI:COUNT (for example 1e-4:1e3:15).")
    try:
        lo, hi = float(parts[0]), float(parts[1])
        count = int(parts[2])
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"'{text}' is not LO:HI:COUNT with numbers LO and HI and a whole COUNT "
            "(for example 1e-4:1e3:15).") from None
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo <= 0 or hi <= 0:
        raise argparse.ArgumentTypeError(f"In '{text}' LO and HI must be positive numbers "
                                         "(the grid is log-spaced).")
    if hi < lo:
        raise argparse.ArgumentTypeError(f"In '{text}' HI must not be below LO.")
    if count < 1 or count > 200:
        raise argparse.ArgumentTypeError(f"In '{text}' COUNT must be between 1 and 200.")
    return lo, hi, count


def parse_families(text: str) -> tuple[str, ...]:
    """Comma-separated penalty families: ridge, lasso, elasticnet."""
    from .spec import FAMILIES

    out = []
    for part in _names(text):
        word = part.strip().lower().replace("-", "").replace("_", "").replace(" ", "")
        if word not in FAMILIES:
            raise argparse.ArgumentTypeError(
                f"'{part}' is not a penalty family: use {', '.join(FAMILIES)} (comma separated).")
        if word not in out:
            out.append(word)
    if not out:
        raise argparse.ArgumentTypeError("Name at least one penalty family, e.g. ridge,lasso.")
    return tuple(out)


def parse_l1_ratios(text: str) -> tuple[float, ...]:
    """Comma-separated elastic-net mixing parameters in [0, 1]."""
    out = []
    for part in _names(text):
        try:
            v = float(part)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"'{part}' is not a mixing parameter: use numbers in [0, 1] such as 0.1,0.5,0.9."
            ) from None
        if not (math.isfinite(v) and 0.0 <= v <= 1.0):
            raise argparse.ArgumentTypeError(f"Mixing parameter '{part}' must lie in [0, 1].")
        out.append(v)
    if not out:
        raise argparse.ArgumentTypeError("Give at least one mixing parameter, e.g. 0.5.")
    return tuple(out)


def parse_penalties(text: str) -> str | tuple[float, ...]:
    """``none``, ``ridge`` or a comma-separated list of penalties (0 or more)."""
    word = text.strip().lower()
    if word in ("none", "ridge"):
        return word
    values = []
    for part in _names(text):
        try:
            v = float(part)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"'{part}' is not a penalty: use none, ridge or numbers such as 0,0.01,1.") from None
        if not math.isfinite(v) or v < 0:
            raise argparse.ArgumentTypeError(f"Penalty '{part}' must be a finite number, 0 or more.")
        values.append(v)
    if not values:
        raise argparse.ArgumentTypeError("Give none, ridge or at least one number.")
    return tuple(values)


def parse_orders(text: str) -> tuple[int, ...]:
    """Comma-separated whole numbers, 0 or more."""
    out = []
    for part in _names(text):
        try:
            v = int(part)
        except ValueError:
            raise argparse.ArgumentTypeError(f"Order '{part}' is not a whole number.") from None
        if v < 0 or v > 30:
            raise argparse.ArgumentTypeError(f"Order {v} is outside 0-30.")
        out.append(v)
    if not out:
        raise argparse.ArgumentTypeError("Give at least one order, e.g. 1,2,3.")
    return tuple(out)


def parse_depths(text: str) -> tuple[int, ...]:
    """Lag depths: comma-separated whole numbers or ranges, e.g. ``0-4`` or ``0,1,3``."""
    out: list[int] = []
    for part in _names(text):
        lo, _, hi = part.partition("-")
        try:
            a, b = int(lo), int(hi) if hi else int(lo)
        except ValueError:
            raise argparse.ArgumentTypeError(f"Lag depth '{part}' is not a whole number or a "
                                             "range like 0-4.") from None
        if a < 0 or b > 200 or b < a:
            raise argparse.ArgumentTypeError(f"Lag depths '{part}' must lie in 0-200, low to high.")
        out += list(range(a, b + 1))
    if not out:
        raise argparse.ArgumentTypeError("Give at least one lag depth, e.g. 0-4.")
    return tuple(sorted(set(out)))


def _int_at_least(minimum: int):
    """argparse type: a whole number of at least ``minimum``."""
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a whole number.") from None
        if v < minimum:
            raise argparse.ArgumentTypeError(f"'{text}' must be {minimum} or more.")
        return v
    return parse


_positive_int = _int_at_least(1)
_count = _int_at_least(0)


def _fraction(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number.") from None
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"'{text}' must lie strictly between 0 and 1.")
    return v


# ---------------------------------------------------------------------------
# parser
# ---------------------------------------------------------------------------
def _scheme_help() -> str:
    return " ".join(f"{k} ({v})" for k, v in SCHEME_HELP.items())


class _HelpFormatter(argparse.HelpFormatter):
    """Adds '(default: X)' to options whose default is a real value."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        if ("%(default)" not in text and action.default is not None
                and action.default is not False
                and action.default is not argparse.SUPPRESS and action.option_strings):
            text += " (default: %(default)s)"
        return text


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``fitladder`` command."""
    top = argparse.ArgumentParser(
        prog=PROG,
        description="Choose the polynomial order and ridge penalty a data set supports, "
                    "check the choice on rows the fit never saw, and write a meeting pack "
                    "(one-page summary, charts, tables, the fitted model).",
        epilog="Exit status: 0 done; 2 bad input or usage; 1 internal error "
               "(set FITLADDER_DEBUG=1 to see the traceback). Run "
               "'fitladder run --help' or 'fitladder rerun --help' for their options.")
    sub = top.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    run = sub.add_parser(
        "run", help="sweep a data file and write the pack",
        description="Sweep every (order, penalty) cell on DATA, recommend one by the "
                    "one-standard-error rule, and write the pack into --out. Progress goes "
                    "to stderr; the recommendation and the pack folder to stdout.",
        formatter_class=_HelpFormatter)
    run.add_argument("data", metavar="DATA",
                     help="table to read: CSV/TSV text, Excel .xlsx or Parquet")
    run.add_argument("--target", required=True, metavar="COL", help="column to predict")
    run.add_argument("--inputs", type=_names, metavar="A,B,...", default=None,
                     help="input columns, comma separated (default: every numeric column "
                          "except the target, the order, group and split columns, row numbers "
                          "and columns that reproduce the target; those left out are named)")
    run.add_argument("--order-column", metavar="COL", default=None,
                     help="column giving the order of rows in time (numbers or dates); rows "
                          "are sorted by it; used by the blocked and holdout schemes")
    run.add_argument("--rows-in-time-order", choices=("yes", "no"), default=None,
                     help="without --order-column: whether the file's row order is time order. "
                          "Unsaid, the checks for serial dependence and period shift assume "
                          "it and say so (warnings at most 'caution'); 'no' skips them")
    run.add_argument("--group-column", metavar="COL", default=None,
                     help="column of group labels (batch, subject, site) for --scheme grouped")
    run.add_argument("--split-column", metavar="COL", default=None,
                     help="column of your own fold labels for --scheme column")
    run.add_argument("--scheme", choices=SCHEMES, default="kfold",
                     help="validation scheme. " + _scheme_help())
    run.add_argument("--folds", type=_positive_int, default=DEFAULT_FOLDS, metavar="K",
                     help="number of folds (kfold, repeated, blocked, grouped)")
    run.add_argument("--repeats", type=_positive_int, default=DEFAULT_REPEATS, metavar="R",
                     help="repetitions of the shuffled folds (repeated)")
    run.add_argument("--gap", type=_count, default=DEFAULT_GAP, metavar="G",
                     help="rows left out of training on each side of a held-out block (blocked)")
    run.add_argument("--holdout-fraction", type=_fraction, default=DEFAULT_HOLDOUT_FRACTION, metavar="F",
                     help="share of rows, at the end of the order, held out (holdout)")
    orders = run.add_mutually_exclusive_group()
    orders.add_argument("--max-order", type=_count, default=DEFAULT_MAX_ORDER, metavar="N",
                        help="sweep orders 0..N (0 = intercept only, 1 = straight line)")
    orders.add_argument("--orders", type=parse_orders, default=None, metavar="1,2,5",
                        help="sweep only these orders instead of 0..--max-order")
    run.add_argument("--interactions", action="store_true",
                     help="include products of inputs (x1*x2 ...) up to the order, not only "
                          "powers of each input")
    run.add_argument("--penalties", type=parse_penalties, default="ridge", metavar="none|ridge|LIST",
                     help="none: no penalty only; ridge: 0 plus the log-spaced grid of "
                          "--penalty-range; LIST: these values, comma separated (e.g. 0,0.1,10)")
    run.add_argument("--penalty-range", type=parse_penalty_range, default=None,
                     metavar="LO:HI:COUNT",
                     help="log-spaced ridge grid used with --penalties ridge (default: a "
                          "range fitted to the data, widened when the pick lies on its edge)")
    run.add_argument("--families", type=parse_families, default=("ridge",),
                     metavar="ridge,lasso,elasticnet",
                     help="penalty families swept side by side on the same penalties "
                          "(scikit-learn Ridge / Lasso / ElasticNet alpha on standardised terms; "
                          "default ridge)")
    run.add_argument("--l1-ratios", type=parse_l1_ratios, default=None, metavar="0.1,0.5,0.9",
                     help="elastic-net mixing parameters (l1_ratio), used with --families "
                          "elasticnet (default 0.1,0.5,0.9)")
    run.add_argument("--rule", choices=SELECTION_RULES, default=SELECTION_RULES[0],
                     help="how the recommended cell is chosen: paired (default; differences "
                          "from the best cell on the same validation rows, within one standard "
                          "error of those differences) or unpaired (the classic "
                          "one-standard-error rule on each cell's own spread)")
    run.add_argument("--errors", choices=tuple(ERROR_UNITS), default=DEFAULT_ERROR_UNIT,
                     help="unit of every error in the pack's headline and in the line printed "
                          "at the end: mse (mean squared error) or rmse (its root, in the "
                          "target's units); the page's 'Errors shown as'")
    run.add_argument("--seed", type=int, default=DEFAULT_SEED, metavar="S",
                     help="seed for every shuffle")
    run.add_argument("--decimal-comma", action="store_true",
                     help="numbers in the file use a decimal comma (3,14); the delimiter must "
                          "then be a semicolon or a tab")
    run.add_argument("--sheet", default=None, metavar="NAME",
                     help="worksheet of an Excel file (name or 0-based number; default the first)")
    run.add_argument("--compare", type=parse_orders, default=None, metavar="1,2,6",
                     help="orders to show side by side, at the recommended penalty (default: "
                          "order 1, the recommended order and the highest)")
    run.add_argument("--more-targets", type=_names, default=None, metavar="A,B",
                     help="more columns to predict from the same inputs: one pass over the "
                          "rows, a recommendation and a pack section per target")
    run.add_argument("--lags", type=parse_depths, default=None, metavar="0-4",
                     help="compare these lag depths of the inputs (depth L uses the values "
                          "0..L rows back; rows in time order)")
    run.add_argument("--target-lags", type=parse_depths, default=None, metavar="0-2",
                     help="compare these depths of past target values as terms (needs "
                          "--scheme blocked with --gap at least the deepest, or holdout)")
    run.add_argument("--lag-inputs", type=_names, default=None, metavar="A,B",
                     help="inputs whose past values are used (default: every input)")
    run.add_argument("--rank-inputs", choices=("lasso", "given"), default=None,
                     help="compare the first 1, 2, ... inputs, ranked inside each split by "
                          "their entry into the lasso path (lasso) or in --inputs order (given)")
    run.add_argument("--stream", action="store_true",
                     help="read DATA (CSV, Parquet, or a folder of Parquet files) in record "
                          "batches instead of whole: for tables larger than memory; shuffled "
                          "k-fold only, folds from a hash of the seed and the row number; the "
                          "steps after the sweep use a seeded sample (--sample-rows). Implied "
                          "when DATA is a folder")
    run.add_argument("--sample-rows", type=_positive_int, default=100_000, metavar="N",
                     help="rows in the seeded sample that side-by-side fits, learning curve, "
                          "checks and charts use with --stream or --cluster")
    run.add_argument("--cluster", default=None, metavar="ADDRESS|local",
                     help="summarise DATA on a Dask cluster (scheduler address, or 'local' for "
                          "a local cluster); DATA may be any path or URL Dask reads (Parquet "
                          "or CSV); needs the optional 'cluster' extra (dask, distributed)")
    run.add_argument("--out", required=True, metavar="DIR",
                     help="folder to write the pack into (created if missing; a folder holding "
                          "other files is refused unless --overwrite)")
    run.add_argument("--time-limit", type=float, default=None, metavar="SECONDS",
                     help="refuse requests estimated to take longer (default 600, or "
                          "FITLADDER_MAX_SECONDS); the estimate is printed before the sweep")
    run.add_argument("--memory-limit", type=float, default=None, metavar="MB",
                     help="refuse requests estimated to need more memory (default 4096, or "
                          "FITLADDER_MAX_MEMORY_MB)")
    run.add_argument("--overwrite", action="store_true",
                     help="write into a --out folder that holds files this program did not "
                          "write: the pack files are replaced, the other files kept")

    rerun = sub.add_parser(
        "rerun", help="run a recorded request again and write a new pack",
        description="Read DIR/record.json (checked field by field), load the same data file "
                    "(checked against the recorded SHA-256 before it is read; a file outside "
                    "the record's folder only when named with --data) and write the pack "
                    "again into --out; its summary.json is identical to the recorded run's.")
    rerun.add_argument("record", metavar="RECORD",
                       help="record.json of an earlier pack (or the pack folder)")
    rerun.add_argument("--data", default=None, metavar="DATA",
                       help="data file to use (must have the recorded SHA-256); needed when "
                            "the recorded path lies outside the record's folder")
    rerun.add_argument("--out", required=True, metavar="DIR2",
                       help="folder to write the new pack into (as for run)")
    rerun.add_argument("--overwrite", action="store_true",
                       help="write into a --out folder that holds other files (as for run)")
    return top


# ---------------------------------------------------------------------------
# running
# ---------------------------------------------------------------------------
class _StderrProgress:
    """Progress lines on stderr, one per new message."""

    def __init__(self, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.last = None

    def __call__(self, fraction: float, message: str) -> None:
        if message == self.last:
            return
        self.last = message
        print(f"[{100 * min(max(fraction, 0.0), 1.0):3.0f}%] {message}", file=self.stream,
              flush=True)


def _penalty_grid(args: argparse.Namespace) -> tuple[float, ...]:
    choice = args.penalties
    if args.penalty_range is not None and choice != "ridge":
        raise UsageProblem("--penalty-range applies only with --penalties ridge.",
                           code="bad_penalty")
    if choice == "none":
        return (0.0,)
    if choice == "ridge":
        if args.penalty_range is None:
            return ()       # 0 plus a range fitted to the data, widened at an edge
        lo, hi, count = args.penalty_range
        return default_penalties(lo, hi, count, include_zero=True)
    return tuple(choice)


def _load(path: str, *, decimal: str | None, sheet, name: str | None = None, columns=None):
    """Read a local file; the browser's upload cap does not apply to the user's own disk."""
    from .loading import NO_SIZE_LIMIT, load_table

    p = Path(path)
    if not p.exists():
        raise InputProblem(f"There is no file '{path}'. Check the path.", code="not_found")
    if p.is_dir():
        raise InputProblem(f"'{path}' is a folder; give the data file inside it.",
                           code="not_found")
    return load_table(str(p), name=name, decimal=decimal, sheet=_sheet(sheet),
                      max_bytes=NO_SIZE_LIMIT, columns=columns)


def _sheet(sheet):
    """``--sheet`` as the loader takes it: a number given as text is the sheet's position."""
    return int(sheet) if isinstance(sheet, str) and sheet.isdigit() else sheet


def _say_drops(data, stream=None) -> None:
    """Rows dropped, and why, on stderr where the user is looking."""
    from .loading import describe_drops

    text = describe_drops(data)
    if text:
        print(f"{PROG}: {text}", file=stream or sys.stderr, flush=True)


def _default_inputs(loaded, target: str, exclude: Sequence[str | None]
                    ) -> tuple[list[str], dict[str, str]]:
    """Every other numeric column, less row numbers and columns that reproduce
    the target (`engine.roles.screen_inputs`); returns the inputs and the reasons."""
    from .roles import screen_inputs

    skip = {target, *[c for c in exclude if c]}
    cands = [c for c in loaded.report.numeric_columns if c not in skip]
    if target not in loaded.report.numeric_columns:
        return cands, {}          # prepare() names the problem with the target
    return screen_inputs(loaded.frame, target, cands)


#: Tables at least this wide are read column by column as chosen (as are text
#: files larger than `engine.loading.SAMPLE_BYTES` and other files of that size).
CHOSEN_COLUMNS_FROM_WIDTH = 200


def _load_for_request(args: argparse.Namespace, decimal, penalties, more: tuple, progress
                      ) -> tuple:
    """The table and the inputs, reading only the chosen columns of a wide or large file.

    The header and a bounded sample come first (`engine.loading.peek_table`);
    the inputs (named, or by default every other column of numbers in the
    sample) are checked against the request budget before any other cell is
    read; then only the target, input and role columns are materialised.
    Small, narrow files are read whole, as before. Returns (loaded, inputs, left_out).
    """
    from .loading import SAMPLE_BYTES, peek_table

    roles = (args.order_column, args.group_column, args.split_column) + more
    sheet = _sheet(args.sheet)
    path = Path(args.data)
    head = None
    if path.is_file():
        head = peek_table(path, decimal=decimal, sheet=sheet)
    chosen = None   # every column
    if head is not None and (path.stat().st_size > SAMPLE_BYTES
                             or head.report.columns_read >= CHOSEN_COLUMNS_FROM_WIDTH):
        rep = head.report
        names = [str(c) for c in head.frame.columns]
        skip = {args.target, *[c for c in roles if c]}
        inputs = (list(args.inputs) if args.inputs is not None else
                  [c for c in names if c not in skip and (c in rep.numeric_columns or
                                                          rep.ignored_reasons.get(c) == "no values")])
        wanted = list(dict.fromkeys([args.target, *[c for c in roles if c], *inputs]))
        if inputs and set(wanted) <= set(names):
            _check_budget(args, tuple(inputs), penalties, more,
                          rep.rows_estimate or rep.rows_read,
                          estimated=True if rep.rows_estimate else "at least")
            chosen = wanted
    loaded = _load(args.data, decimal=decimal, sheet=args.sheet, columns=chosen)
    progress(0.0, "Preparing the chosen columns")
    if args.inputs is not None:
        return loaded, args.inputs, {}
    inputs, left = _default_inputs(loaded, args.target, roles)
    return loaded, inputs, left


def _say_left_out(left: dict[str, str], data, stream=None) -> None:
    """Columns kept out of the default inputs, on stderr and in the pack's data notes."""
    if not left:
        return
    text = ("Left out of the default inputs: " + "; ".join(f"{c} ({why})" for c, why in left.items())
            + ". Name the inputs with --inputs to use them.")
    print(f"{PROG}: {text}", file=stream or sys.stderr, flush=True)
    notes = getattr(data, "notes", None)
    if isinstance(notes, list):
        notes.append(text)


def _report(result, stream=None) -> None:
    stream = stream or sys.stdout
    s = result.summary
    r = s["recommended"]
    fam = {"elasticnet": "elastic-net"}.get(r.get("family", "ridge"), r.get("family", "ridge"))
    pen = "no penalty" if r["penalty"] == 0 else f"{fam} penalty {r['penalty']:.3g}"
    from .labels import rung_text
    more = rung_text(r.get("lags"), r.get("target_lags"), r.get("inputs_used"))
    h = s.get("headline") or {"unit": "rmse", "validation_error": r.get("validation_rmse")}
    err = (f"validation RMSE {h['validation_error']:.4g} in units of {s['roles']['target']}"
           if h["unit"] == "rmse" else
           f"validation MSE {h['validation_error']:.4g} in squared units of "
           f"{s['roles']['target']}")
    print(f"Recommended: order {r['order']}, {pen}{more} ({err}; "
          f"{len(s['warnings'])} warning{'s' if len(s['warnings']) != 1 else ''}).",
          file=stream)
    for w in s["warnings"]:
        print(f"Warning ({w.get('severity') or 'caution'}): {w['message']} {w['advice']}",
              file=stream)
    for t in s.get("targets") or []:
        if t["target"] != s["roles"]["target"]:
            print(f"Target {t['target']}: {t['recommended']} (section {t['section']}).",
                  file=stream)
    print(f"Pack written to {result.out_dir} ({len(result.files)} files).", file=stream)


def _prepare(frame, targets: tuple[str, ...], inputs, **roles):
    """Prepared data for one target, or for several (`engine.targets.prepare_targets`)."""
    from .loading import prepare
    from .targets import prepare_targets
    if len(targets) == 1:
        return prepare(frame, targets[0], inputs, **roles)
    return prepare_targets(frame, targets, inputs, **roles)


def command_stream(args: argparse.Namespace, folder=None) -> int:
    """``fitladder run --stream`` / ``--cluster``: summaries without holding the table."""
    from . import streaming

    if args.scheme != "kfold":
        raise UsageProblem(f"--stream and --cluster support --scheme kfold only (got "
                           f"{args.scheme}); load the table whole for other schemes.",
                           code="bad_scheme")
    for flag, value in (("--order-column", args.order_column), ("--group-column",
                        args.group_column), ("--split-column", args.split_column),
                        ("--more-targets", getattr(args, "more_targets", None)),
                        ("--lags", getattr(args, "lags", None))):
        if value:
            raise UsageProblem(f"{flag} cannot be used with --stream or --cluster.",
                               code="bad_option")
    penalties = _penalty_grid(args)
    progress = _StderrProgress()
    progress(0.0, f"Reading {args.data} in record batches")
    if args.cluster:
        from . import cluster

        inputs = args.inputs or [c for c in cluster.numeric_columns(args.data)
                                 if c != args.target]
    else:
        inputs = args.inputs or [c for c in streaming.numeric_columns(args.data)
                                 if c != args.target]
    if not inputs:
        raise InputProblem(f"No numeric input columns besides the target '{args.target}'. "
                           "Name them with --inputs.", code="no_inputs")
    scheme = SchemeSpec(kind="kfold", folds=args.folds)
    spec = SweepSpec(target=args.target, inputs=tuple(inputs), max_order=args.max_order,
                     orders=args.orders, interactions=args.interactions, penalties=penalties,
                     scheme=scheme, seed=args.seed)
    spec.validate()
    result = _stream_pack(folder if folder is not None else args.out, str(args.data), spec,
                          sample_rows=args.sample_rows, cluster=args.cluster,
                          compare=args.compare, progress=progress,
                          error_unit=args.errors)
    _report(result)
    return EXIT_OK


class _StreamedSource:
    """What `engine.pack.build_pack` reads of a streamed source: its fingerprint and counts."""

    def __init__(self, name: str, file_format: str, rows_read: int, fp, notes: list[str]):
        from .loading import LoadReport

        self.report = LoadReport(source_name=name, file_format=file_format, delimiter=None,
                                 decimal=".", rows_read=rows_read, columns_read=0,
                                 numeric_columns=[], ignored_columns=[], ignored_reasons={},
                                 sha256=fp.sha256 if fp else None,
                                 size_bytes=fp.size_bytes if fp else None, notes=notes)


def _stream_pack(out, source: str, spec: SweepSpec, *, sample_rows: int, cluster: str | None,
                 compare, progress, expect_sha256: str | None = None,
                 error_unit: str | None = None):
    """Stream (or map over a Dask cluster) ``source`` and write the pack of ``spec``.

    A local file or folder is fingerprinted (SHA-256) in a background thread
    while its rows are read, so the record ties the pack to the exact bytes
    and ``fitladder rerun`` can check them; a URL read by a cluster is not
    fingerprinted (the record says so). With ``expect_sha256`` (a re-run) a
    source whose bytes changed while they were read is refused.
    """
    from .analysis import ArrayData
    from .fingerprint import fingerprint_in_background
    from .pack import build_pack
    from . import streaming

    local = "://" not in source
    waiting = fingerprint_in_background(source) if local else None
    inputs = list(spec.inputs)
    if cluster:
        from . import cluster as dask_cluster

        stats = dask_cluster.cluster_statistics(cluster, source, spec.target, inputs, spec,
                                                sample_rows=sample_rows, progress=progress)
    else:
        stats = streaming.stream_statistics(source, spec.target, inputs,
                                            max(spec.order_list()), spec.interactions,
                                            spec.scheme.folds, spec.seed,
                                            sample_rows=sample_rows, progress=progress)
    analysis = streaming.analyse_moments(stats.folds, stats.basis, spec, stats.rows_used,
                                         stats.sample_folds, stats.notes)
    data = ArrayData(stats.sample_X, stats.sample_y, tuple(inputs), spec.target)
    fp = waiting() if waiting else None
    if expect_sha256 is not None and (fp is None or fp.sha256 != expect_sha256):
        raise InputProblem(f"The data '{source}' changed while it was read. Run again when "
                           "nothing else writes to it.", code="data_changed")
    if fp is None:
        notes = ["The data were read from a URL by the cluster and not fingerprinted: the "
                 "record cannot prove which bytes they were, so 'fitladder rerun' refuses it."]
    elif fp.kind == "folder":
        notes = [f"SHA-256 of the folder's {fp.files} Parquet files (one line per file: "
                 "relative path, size and the file's own SHA-256)."]
    else:
        notes = []
    path = Path(source)
    kind = ("parquet" if not local or path.is_dir() or path.suffix.lower() in (".parquet", ".pq")
            else "csv")
    where = source if not local else str(path.resolve())
    result = build_pack(out, loaded=_StreamedSource(path.name, kind, stats.rows_read, fp, notes),
                        source_name=path.name,
                        data=data, spec=spec, analysis=analysis, compare_orders=compare,
                        progress=progress,
                        load_options={"stream": True, "cluster": cluster,
                                      "sample_rows": sample_rows},
                        source_path=where, model_file_in_background=not cluster,
                        **({"error_unit": error_unit} if error_unit else {}))
    return result


def command_run(args: argparse.Namespace) -> int:
    if args.stream or args.cluster or (Path(args.data).is_dir() and "://" not in args.data):
        with _out_folder(args) as folder:
            return command_stream(args, folder)
    penalties = _penalty_grid(args)
    decimal = "," if args.decimal_comma else None
    from .render import ChartRenderer

    # vl-convert starts in a child process, forked before the heavy imports, while they
    # are made and the table is read and analysed
    with ChartRenderer(fork=True) as renderer, _out_folder(args) as folder:
        return _run_into(args, folder, penalties, decimal, renderer)


def _out_folder(args: argparse.Namespace):
    """The guarded --out folder: checked, locked and written via a temporary sibling."""
    from .pack import pack_folder

    return pack_folder(args.out, overwrite=args.overwrite)


def _check_budget(args: argparse.Namespace, inputs: tuple, penalties, more: tuple,
                  rows: int, estimated: bool | str = False) -> None:
    """Refuse a request over the limits before any column is prepared; say its size.

    ``estimated``: ``rows`` is an estimate from a sample, before the table is read;
    the request is checked again, and its size said, once the rows are known."""
    from .budget import Limits, check_request

    lags = None
    if args.lags is not None or args.target_lags is not None:
        lags = LagSpec(inputs=tuple(args.lag_inputs or ()), depths=args.lags or (0,),
                       target_depths=args.target_lags or (0,))
    try:
        spec = SweepSpec(target=args.target, inputs=tuple(str(c) for c in inputs),
                         max_order=args.max_order, orders=args.orders,
                         interactions=args.interactions, penalties=penalties,
                         scheme=SchemeSpec(kind=args.scheme, folds=args.folds,
                                           repeats=args.repeats),
                         lags=lags, extra_targets=more, families=args.families,
                         **({"l1_ratios": args.l1_ratios} if args.l1_ratios else {}))
    except (TypeError, ValueError):  # the full request is checked again later
        return
    limits = Limits.from_environment(args.time_limit, args.memory_limit)
    budget = check_request(spec, rows, limits=limits, rows_estimated=estimated)
    if not estimated:
        print(f"{PROG}: request: {budget.text()}.", file=sys.stderr, flush=True)


def _run_into(args: argparse.Namespace, folder, penalties, decimal, renderer=None) -> int:
    from .pack import build_pack

    progress = _StderrProgress()
    progress(0.0, f"Reading {args.data}")
    more = tuple(args.more_targets or ())
    loaded, inputs, left = _load_for_request(args, decimal, penalties, more, progress)
    if not inputs:
        raise InputProblem(f"No input columns are left besides the target '{args.target}'. "
                           "Name them with --inputs.", code="no_inputs")
    _check_budget(args, tuple(inputs), penalties, more, loaded.report.rows_read)
    data = _prepare(loaded.frame, (args.target,) + more, inputs,
                    order_column=args.order_column, group_column=args.group_column,
                    split_column=args.split_column)
    _say_drops(data)
    _say_left_out(left, data)
    lags = None
    if args.lags is not None or args.target_lags is not None:
        lags = LagSpec(inputs=tuple(args.lag_inputs or ()), depths=args.lags or (0,),
                       target_depths=args.target_lags or (0,))
    scheme = SchemeSpec(kind=args.scheme, folds=args.folds, repeats=args.repeats, gap=args.gap,
                        holdout_fraction=args.holdout_fraction, order_column=args.order_column,
                        group_column=args.group_column, split_column=args.split_column,
                        rows_in_time_order={"yes": True, "no": False}.get(
                            args.rows_in_time_order))
    spec = SweepSpec(target=data.target, inputs=tuple(data.inputs), max_order=args.max_order,
                     orders=args.orders, interactions=args.interactions, penalties=penalties,
                     scheme=scheme, seed=args.seed, lags=lags, nested_inputs=args.rank_inputs,
                     extra_targets=more, families=args.families, rule=args.rule,
                     **({"l1_ratios": args.l1_ratios} if args.l1_ratios else {}))
    result = build_pack(folder, loaded=loaded, source_name=loaded.report.source_name,
                        renderer=renderer,
                        data=data, spec=spec, compare_orders=args.compare, progress=progress,
                        load_options={"decimal": decimal, "sheet": args.sheet},
                        source_path=str(Path(args.data).resolve()),
                        model_file_in_background=True, error_unit=args.errors)
    _report(result)
    return EXIT_OK


def read_record(path: str | Path) -> tuple[dict, Path]:
    """Read a ``record.json`` (a pack folder is accepted too); its dict and its path.

    Only the JSON is checked here (size, encoding, syntax); the fields are
    checked by `engine.record.check_record`.
    """
    from .record import RECORD_MAX_BYTES

    p = Path(path)
    if p.is_dir():
        p = p / "record.json"
    if not p.is_file():
        raise InputProblem(f"There is no record file '{p}'. Give the record.json written "
                           "inside a pack folder (or the pack folder itself).",
                           code="not_found")
    size = p.stat().st_size
    if size > RECORD_MAX_BYTES:
        raise InputProblem(f"'{p}' is {size:,} bytes, far more than a record holds (at most "
                           f"{RECORD_MAX_BYTES:,}). Give the record.json written inside a "
                           "pack folder.", code="bad_record")
    try:
        with open(p, "rb") as fh:
            text = fh.read(RECORD_MAX_BYTES + 1).decode("utf-8")
        rec = json.loads(text)
    except UnicodeDecodeError:
        raise InputProblem(f"'{p}' is not UTF-8 text, so it is not a record. Give the "
                           "record.json written inside a pack folder.",
                           code="bad_record") from None
    except json.JSONDecodeError as exc:
        raise InputProblem(f"'{p}' is not valid JSON ({exc.msg} at line {exc.lineno}, column "
                           f"{exc.colno}), so it is not a readable record. Fix that spot, or "
                           "give the record.json written inside a pack folder.",
                           code="bad_record") from None
    except RecursionError:
        raise InputProblem(f"'{p}' nests its JSON too deeply to be a record. Give the "
                           "record.json written inside a pack folder.",
                           code="bad_record") from None
    return rec, p


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
    except ValueError:
        return False
    return True


def locate_recorded_data(rec: dict, record_path: Path, given: str | None,
                         folder_ok: bool = False) -> Path:
    """The data file of a re-run, checked against the record before it is parsed.

    With ``given`` (``--data``) that file is used. Otherwise the recorded path
    is taken relative to the record's folder (a bare file name: the file next
    to the record) and refused when it lies outside that folder, so a record
    cannot make the command read files elsewhere. Either way the file must be
    a regular file of the recorded size whose SHA-256 matches the record; the
    hash is computed before any parsing. With ``folder_ok`` (a streamed pack)
    the data may be a folder of Parquet files, checked by its fingerprint
    (`engine.fingerprint`).
    """
    from .fingerprint import source_fingerprint

    facts = rec["data"]
    if facts.get("sha256") is None:
        raise InputProblem(
            "The record holds no SHA-256 of its data (they were read from a URL by a cluster), "
            "so a re-run cannot prove it reads the same rows. Run 'fitladder run' on the data "
            "again instead.", code="not_found")
    folder = record_path.parent.resolve()
    if given:
        path = Path(given)
        shown = given
    else:
        recorded = facts.get("path") or facts.get("file")
        if not recorded:
            raise InputProblem("The record does not say where the data file is. Give it with "
                               "--data PATH.", code="not_found")
        candidate = Path(recorded)
        path = (candidate if candidate.is_absolute() else folder / candidate).resolve()
        shown = recorded
        if not _inside(path, folder):
            beside = folder / Path(str(facts.get("file") or "")).name
            if facts.get("file") and beside.is_file():
                print(f"{PROG}: the recorded data path '{recorded}' lies outside the record's "
                      f"folder; using '{beside.name}' next to the record (checked by SHA-256).",
                      file=sys.stderr)
                path, shown = beside, str(beside)
            else:
                raise InputProblem(
                    f"The record points at the data file '{recorded}', which is outside the "
                    f"record's folder '{folder}'; a re-run reads only files inside it unless "
                    f"told otherwise. If that is the file you mean, add --data '{recorded}' "
                    "(its SHA-256 is checked before it is read), or copy the file next to "
                    "record.json.", code="outside_record")
    if not path.exists():
        raise InputProblem(f"There is no data file '{shown}'. Give the file with --data PATH.",
                           code="not_found")
    if not (path.is_file() or (folder_ok and path.is_dir())):
        raise InputProblem(f"'{shown}' is not a regular file (a folder, device or pipe). Give "
                           "the data file with --data PATH.", code="not_found")
    fingerprint = source_fingerprint(path) if path.is_dir() else None
    size = fingerprint.size_bytes if fingerprint else path.stat().st_size
    want_size = facts.get("size_bytes")
    want = facts["sha256"]
    if want_size is not None and size != want_size:
        raise InputProblem(
            f"The data file '{shown}' is not the one recorded: it is {size:,} bytes, the record "
            f"says {want_size:,} (file '{facts.get('file')}'). Give the original file with "
            "--data, or run 'fitladder run' to make a new pack from the changed data.",
            code="data_changed")
    got = (fingerprint or source_fingerprint(path)).sha256
    if got != want:
        raise InputProblem(
            f"The data file '{shown}' is not the one recorded: its SHA-256 is {got}, the record "
            f"says {want} (file '{facts.get('file')}'). Give the original file with --data, or "
            "run 'fitladder run' to make a new pack from the changed data.",
            code="data_changed")
    return path


def command_rerun(args: argparse.Namespace) -> int:
    from .record import check_record

    rec, record_path = read_record(args.record)
    spec = check_record(rec, str(record_path))
    opts = rec.get("load_options") or {}
    streamed = bool(opts.get("stream"))
    path = locate_recorded_data(rec, record_path, args.data, folder_ok=streamed)
    with _out_folder(args) as folder:
        if streamed:
            return _rerun_streamed(folder, rec, spec, path)
        return _rerun_into(args, folder, rec, spec, path)


def _rerun_streamed(folder, rec: dict, spec, path: Path) -> int:
    """Re-run a streamed (or cluster) pack by streaming the checked data on this machine."""
    from .streaming import SAMPLE_ROWS

    progress = _StderrProgress()
    opts = rec.get("load_options") or {}
    progress(0.0, f"Reading {path} in record batches")
    cells = [(int(q), float(a)) for q, a in rec.get("compare_cells") or []] or None
    result = _stream_pack(folder, str(path), spec,
                          sample_rows=int(opts.get("sample_rows") or SAMPLE_ROWS), cluster=None,
                          compare=cells, progress=progress, expect_sha256=rec["data"]["sha256"],
                          error_unit=rec.get("error_unit"))
    _report(result)
    return EXIT_OK


def _rerun_into(args: argparse.Namespace, folder, rec: dict, spec, path: Path) -> int:
    from .pack import build_pack

    progress = _StderrProgress()
    facts = rec["data"]
    opts = rec.get("load_options") or {}
    progress(0.0, f"Reading {path}")
    loaded = _load(str(path), decimal=opts.get("decimal"), sheet=opts.get("sheet"),
                   name=facts.get("file"))
    if loaded.report.sha256 != facts["sha256"]:  # the file changed while it was read
        raise InputProblem(f"The data file '{path}' changed while it was read. Run again "
                           "when nothing else writes to it.", code="data_changed")
    roles = rec["roles"]
    targets = spec.targets if spec.extra_targets else (roles["target"],)
    data = _prepare(loaded.frame, targets, list(roles["inputs"]),
                    order_column=roles.get("order_column"),
                    group_column=roles.get("group_column"), split_column=roles.get("split_column"))
    _say_drops(data)
    cells = [tuple(c) for c in rec.get("compare_cells") or []] or None
    result = build_pack(folder, loaded=loaded, source_name=facts.get("file") or
                        loaded.report.source_name, data=data, spec=spec, compare_orders=
                        [(int(q), float(a)) for q, a in cells] if cells else None,
                        progress=progress, load_options=opts,
                        source_path=str(Path(path).resolve()),
                        model_file_in_background=True,
                        error_unit=rec.get("error_unit") or DEFAULT_ERROR_UNIT)
    _report(result)
    return EXIT_OK


def _option_hint(exc: InputProblem) -> str:
    """Name the command-line option that fixes a problem the engine words for any front end."""
    text = exc.message
    if "decimal ','" in text or "decimal comma" in text:
        return " On the command line: add --decimal-comma."
    if exc.code == "bad_scheme" and "group column" in text:
        return " On the command line: --group-column COL."
    if exc.code == "bad_scheme" and "split column" in text:
        return " On the command line: --split-column COL."
    return ""


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``fitladder`` command; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)  # exits 2 on a usage error, 0 on --help
    previous = _stop_cleanly_on_sigterm()
    try:
        if args.command == "run":
            return command_run(args)
        return command_rerun(args)
    except InputProblem as exc:
        print(f"{PROG}: {exc.message}{_option_hint(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted; nothing was left in --out.", file=sys.stderr)
        return 130
    except _Terminated:
        print(f"{PROG}: stopped (SIGTERM); nothing was left in --out.", file=sys.stderr)
        return 143
    except Exception as exc:  # anything else is a defect of the program, not the input
        if os.environ.get("FITLADDER_DEBUG") == "1":
            traceback.print_exc()
        print(f"{PROG}: internal error ({type(exc).__name__}: {exc}). Set FITLADDER_DEBUG=1 to "
              "see the traceback.", file=sys.stderr)
        return EXIT_INTERNAL
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _small_pages() -> None:
    """Large arrays on ordinary memory pages, unless ``NUMPY_MADVISE_HUGEPAGE`` says otherwise.

    numpy asks the system for huge pages for every large array; where the
    system then compacts memory to find them, each fresh array costs far more
    than it saves (measured on a 1,000,000-row run on an idle 2-core machine
    here: 2.6-2.8 s of system time against 3.3-3.9 s, and 0.5-1.0 s less in all).
    """
    if os.environ.get("NUMPY_MADVISE_HUGEPAGE") is not None:
        return
    try:
        from numpy._core.multiarray import _set_madvise_hugepage
    except ImportError:  # pragma: no cover - another numpy layout
        return
    _set_madvise_hugepage(False)


#: glibc ``mallopt`` parameters and the values the command line sets (see `_kept_memory`)
_M_TRIM_THRESHOLD, _M_TOP_PAD, _M_MMAP_THRESHOLD = -1, -2, -3
_KEPT_MEMORY = {_M_MMAP_THRESHOLD: 32 << 20,       # glibc's largest: smaller blocks are reused
                _M_TRIM_THRESHOLD: (1 << 31) - 1,  # freed memory stays with the process
                _M_TOP_PAD: 64 << 20}              # the heap grows in steps of 64 MB


def _kept_memory() -> bool:
    """Keep freed memory in the process for the next array, unless ``MALLOC_*`` says otherwise.

    With glibc's defaults, arrays of a few MB are given back to the system when
    freed and the next one of the same size is handed fresh pages, each zeroed
    by the kernel on first touch. The passes over a large table allocate and
    free such blocks thousands of times; on a 1,000,000-row run here this
    setting cut the page faults from about 600,000 to 360,000 and the system
    time by 1-3 s. A short-lived command gives the memory back when it exits;
    the page (app.py), a long-lived server, keeps glibc's defaults. Other C
    libraries (musl, macOS) are left alone.

    Returns
    -------
    bool
        True when glibc took every setting.
    """
    if any(k.startswith("MALLOC_") for k in os.environ) or not sys.platform.startswith("linux"):
        return False
    import ctypes

    try:
        mallopt = ctypes.CDLL("libc.so.6").mallopt
    except (OSError, AttributeError):  # pragma: no cover - not glibc
        return False
    mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
    return all([mallopt(param, value) == 1 for param, value in _KEPT_MEMORY.items()])


def entry() -> NoReturn:
    """The ``fitladder`` command and ``python -m engine``: `main`, then a quick exit.

    Once `main` has returned, its output is flushed and the exit handlers run
    (`atexit`); the interpreter's own teardown, which only frees memory and takes
    about 0.2-0.4 s with the scientific libraries loaded, is skipped.
    """
    _small_pages()
    _kept_memory()
    status = main()
    import atexit

    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed pipe: nothing more can be said
            pass
    os._exit(status)


class _Terminated(BaseException):
    """SIGTERM arrived: unwind so the half-written pack is removed."""


def _stop_cleanly_on_sigterm():
    """Turn SIGTERM into an exception (main thread only); return the previous handler."""
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum, frame):  # noqa: ARG001
        raise _Terminated()

    try:
        return signal.signal(signal.SIGTERM, handler)
    except (ValueError, OSError):  # pragma: no cover - not allowed here
        return None


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
