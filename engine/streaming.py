"""Out-of-core sweeps: tables larger than memory, read in record batches.

A file (CSV or Parquet) or a folder of Parquet files is read twice in record
batches with pyarrow, never whole: once for the range of every input (which
fixes the design's scaling) and the row count, once for the per-fold summaries
(`engine.moments`). Peak memory depends on the batch size and the number of
design terms, not on the number of rows.

Fold assignment: row ``i`` (0-based, counted over the whole file or the
folder's files in name order, blank rows included) goes to fold
``hash(seed, i) mod k`` with a fixed 64-bit mixing function (`row_folds`).
It is reproducible from the seed and the row number alone, whatever the
batch or partition sizes, but it is NOT scikit-learn's ``KFold`` shuffle:
folds are of random, not equal, size.

The same per-batch kernel (`batch_moments`) and reduction (`merge_moments`)
run on Dask partitions (`engine.cluster`).

Everything after the sweep (side-by-side fits, learning curve, checks,
charts) runs on a seeded sample of at most ``sample_rows`` rows, drawn
during the second pass by the same kind of row hash (`row_sample_mask`); the
pack says so.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Iterator

import numpy as np

from .design import PolynomialBasis
from .errors import InputProblem
from .fingerprint import folder_files
from .moments import Moments, design_moments, merge_into

#: Rows per record batch read from a file.
BATCH_ROWS = 65_536
#: Default size of the seeded sample for the steps after the sweep.
SAMPLE_ROWS = 100_000

_MASK64 = np.uint64(0xFFFFFFFFFFFFFFFF)


def _mix64(x: np.ndarray) -> np.ndarray:
    """splitmix64 finaliser: a fixed bijective mixing of 64-bit integers."""
    with np.errstate(over="ignore"):
        z = x.astype(np.uint64) + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


def _row_hash(rows: np.ndarray, seed: int, salt: int) -> np.ndarray:
    with np.errstate(over="ignore"):
        key = _mix64(np.asarray([seed & 0xFFFFFFFF | (salt << 32)], dtype=np.uint64))[0]
        return _mix64(np.asarray(rows, dtype=np.uint64) ^ key)


def row_folds(rows: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """Fold of each row number: ``hash(seed, row) mod folds`` (not scikit-learn's shuffle)."""
    return (_row_hash(rows, seed, 1) % np.uint64(folds)).astype(np.int64)


def row_sample_mask(rows: np.ndarray, share: float, seed: int) -> np.ndarray:
    """Rows kept in the seeded sample: ``hash(seed, row) < share * 2**64``."""
    if share >= 1.0:
        return np.ones(np.asarray(rows).shape, dtype=bool)
    limit = np.uint64(int(share * float(2 ** 64 - 1)))
    return _row_hash(rows, seed, 2) < limit


# ---------------------------------------------------------------------------
# the per-piece kernel and its reduction
# ---------------------------------------------------------------------------
def batch_moments(X: np.ndarray, y: np.ndarray, labels: np.ndarray, basis: PolynomialBasis,
                  n_sets: int) -> Moments:
    """Per-set summaries of ``[terms(X), y]`` of one batch of rows (the kernel)."""
    U = basis.scale(np.asarray(X, float))
    return design_moments(U, np.asarray(y, float), np.asarray(labels), n_sets,
                          lambda Uc, out: basis.expand_scaled(Uc, out=out), basis.n_terms)


def merge_moments(a: Moments, b: Moments) -> Moments:
    """Summaries of the union of two disjoint row sets, set by set (the reduction)."""
    out = Moments(a.n.copy(), a.mean.copy(), a.comoment.copy())
    for i in range(b.n_sets):
        merge_into(out, i, float(b.n[i]), b.mean[i], b.comoment[i])
    return out


def accumulate_batches(batches: Iterable[tuple[np.ndarray, np.ndarray, np.ndarray]],
                       basis: PolynomialBasis, n_sets: int) -> Moments:
    """Fold ``(X, y, labels)`` batches into per-set summaries (any chunking, same result)."""
    acc = Moments.empty(n_sets, basis.n_terms + 1)
    for X, y, labels in batches:
        if len(y):
            acc = merge_moments(acc, batch_moments(X, y, labels, basis, n_sets))
    return acc


# ---------------------------------------------------------------------------
# reading in record batches
# ---------------------------------------------------------------------------
def _files(path: Path) -> tuple[str, list[Path]]:
    if path.is_dir():
        files = folder_files(path)   # the order the folder's fingerprint uses too
        if not files:
            raise InputProblem(f"The folder '{path}' holds no Parquet files (.parquet).",
                               code="not_found")
        return "parquet", files
    if not path.is_file():
        raise InputProblem(f"There is no file '{path}'. Check the path.", code="not_found")
    suffix = path.suffix.lower()
    if suffix in (".parquet", ".pq"):
        return "parquet", [path]
    if suffix in (".csv", ".tsv", ".txt"):
        return "csv", [path]
    raise InputProblem(f"'{path.name}' cannot be streamed: give a CSV file, a Parquet file or a "
                       "folder of Parquet files.", code="unsupported_format")


def iter_batches(path: str | Path, columns: list[str],
                 batch_rows: int = BATCH_ROWS) -> Iterator[dict[str, np.ndarray]]:
    """Record batches of ``columns`` as float64 arrays (missing values as NaN).

    Parameters
    ----------
    path : CSV file, Parquet file or folder of Parquet files (read in name order).
    columns : the columns to read; no other column is materialised.
    batch_rows : rows per batch (Parquet; CSV batches are about this size).
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    kind, files = _files(Path(path))
    wanted = list(dict.fromkeys(columns))

    def as_float(batch) -> dict[str, np.ndarray]:
        out = {}
        for name in wanted:
            col = batch.column(batch.schema.get_field_index(name))
            if not (pa.types.is_floating(col.type) or pa.types.is_integer(col.type)):
                try:
                    col = pc.cast(col, pa.float64())
                except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                    raise InputProblem(f"Column '{name}' of '{Path(path).name}' holds values "
                                       "that are not numbers; streaming needs numeric columns.",
                                       code="text_column", column=name) from None
            out[name] = col.to_numpy(zero_copy_only=False).astype(float, copy=False)
        return out

    if kind == "parquet":
        import pyarrow.parquet as pq

        for f in files:
            try:
                pf = pq.ParquetFile(f, pre_buffer=False)   # pre-buffering keeps what it read
            except Exception as exc:
                raise InputProblem(f"'{f.name}' could not be read as Parquet ({exc}).",
                                   code="unreadable") from None
            missing = [c for c in wanted if c not in pf.schema_arrow.names]
            if missing:
                raise InputProblem(f"'{f.name}' has no column {', '.join(missing)}; its columns "
                                   f"are {', '.join(pf.schema_arrow.names[:20])}.",
                                   code="missing_column", column=missing[0])
            for batch in pf.iter_batches(batch_size=batch_rows, columns=wanted):
                yield as_float(batch)
        return
    import pyarrow.csv as pacsv

    from .loading import _na_tokens

    with open(files[0], "rb") as handle:
        head = handle.read(65536).decode("utf-8", errors="replace")
    delimiter = "\t" if head.count("\t") > head.count(",") else ","
    try:
        reader = pacsv.open_csv(
            files[0], read_options=pacsv.ReadOptions(block_size=max(1 << 20, batch_rows * 64)),
            parse_options=pacsv.ParseOptions(delimiter=delimiter),
            convert_options=pacsv.ConvertOptions(
                include_columns=wanted, column_types={c: pa.float64() for c in wanted},
                null_values=_na_tokens(), strings_can_be_null=True))
        for batch in reader:
            yield as_float(batch)
    except (pa.ArrowInvalid, pa.ArrowKeyError) as exc:
        raise InputProblem(f"'{files[0].name}' could not be streamed as a table of numbers "
                           f"({str(exc).splitlines()[0]}). Check the column names, or load it "
                           "without --stream for a detailed message.", code="unreadable") from None


# ---------------------------------------------------------------------------
# the two passes
# ---------------------------------------------------------------------------
@dataclass
class StreamedStatistics:
    """What two streamed passes over a table give.

    Attributes
    ----------
    basis : the design (scaling from every usable row).
    folds : per-fold summaries (`engine.moments.Moments`, one set per fold).
    rows_read, rows_used : rows in the file(s); rows with every chosen value finite.
    sample_X, sample_y, sample_rows, sample_folds : the seeded sample.
    notes : plain sentences for the pack.
    """

    basis: PolynomialBasis
    folds: Moments
    rows_read: int
    rows_used: int
    sample_X: np.ndarray
    sample_y: np.ndarray
    sample_rows: np.ndarray
    sample_folds: np.ndarray
    notes: list[str] = field(default_factory=list)


def _finite(cols: dict[str, np.ndarray], names: list[str]) -> np.ndarray:
    ok = np.ones(len(next(iter(cols.values()))), dtype=bool)
    for c in names:
        ok &= np.isfinite(cols[c])
    return ok


def stream_statistics(path: str | Path, target: str, inputs: list[str], max_order: int,
                      interactions: bool, folds: int, seed: int,
                      sample_rows: int = SAMPLE_ROWS, batch_rows: int = BATCH_ROWS,
                      progress=None) -> StreamedStatistics:
    """Per-fold summaries of a table read in record batches (two passes).

    Rows with a missing or non-finite value in a chosen column are left out
    and counted.
    """
    names = list(inputs) + [target]
    lo = np.full(len(inputs), np.inf)
    hi = np.full(len(inputs), -np.inf)
    rows_read = rows_used = 0
    for cols in iter_batches(path, names, batch_rows):
        ok = _finite(cols, names)
        rows_read += ok.size
        rows_used += int(ok.sum())
        if ok.any():
            X = np.column_stack([cols[c][ok] for c in inputs])
            lo = np.minimum(lo, X.min(axis=0))
            hi = np.maximum(hi, X.max(axis=0))
        if progress:
            progress(0.0, "Streaming: ranges of the inputs")
    if rows_used < folds + 1:
        raise InputProblem(f"Only {rows_used} usable rows were found; at least {folds + 1} are "
                           "needed.", code="too_few_rows")
    basis = PolynomialBasis.fit(np.vstack([lo, hi]), inputs, max_order, interactions)
    share = min(1.0, sample_rows / rows_used) if sample_rows else 0.0
    acc = Moments.empty(folds, basis.n_terms + 1)
    sX, sy, sr, sf = [], [], [], []
    start = 0
    for cols in iter_batches(path, names, batch_rows):
        m = len(cols[target])
        rows = np.arange(start, start + m, dtype=np.int64)
        start += m
        ok = _finite(cols, names)
        if not ok.any():
            continue
        X = np.column_stack([cols[c][ok] for c in inputs])
        y = cols[target][ok]
        r = rows[ok]
        lab = row_folds(r, folds, seed)
        acc = merge_moments(acc, batch_moments(X, y, lab, basis, folds))
        keep = row_sample_mask(r, share, seed)
        if keep.any():
            sX.append(X[keep])
            sy.append(y[keep])
            sr.append(r[keep])
            sf.append(lab[keep])
        if progress:
            progress(min(0.5, 0.5 * start / max(rows_read, 1)), "Streaming: summarising rows")
    d = len(inputs)
    stats = StreamedStatistics(
        basis, acc, rows_read, rows_used,
        np.vstack(sX) if sX else np.zeros((0, d)), np.concatenate(sy) if sy else np.zeros(0),
        np.concatenate(sr) if sr else np.zeros(0, np.int64),
        np.concatenate(sf) if sf else np.zeros(0, np.int64))
    dropped = rows_read - rows_used
    stats.notes.append(
        f"All {rows_used:,} usable rows were read in record batches of {batch_rows:,} rows "
        f"for the sweep (validation grid and recommendation); {dropped:,} rows with a missing "
        "or non-finite value in a chosen column were left out.")
    stats.notes.append(
        f"Folds of the streamed rows: fold = hash(seed {seed}, row number) mod {folds}, "
        "reproducible from the seed and the row number; this is not scikit-learn's shuffle, "
        "and fold sizes vary a little.")
    stats.notes.append(
        f"Side-by-side fits, learning curve, warning checks and charts use a seeded sample of "
        f"{stats.sample_y.size:,} rows (about {share:.2%} of the rows, chosen by a hash of "
        f"seed {seed} and the row number).")
    return stats


# ---------------------------------------------------------------------------
# the analysis of streamed statistics
# ---------------------------------------------------------------------------
def hashed_fold_plan(fold_labels: np.ndarray, folds: int, description: str):
    """A one-round k-fold plan whose pieces are the given fold labels."""
    from .schemes import FoldPlan, _partition_round

    plan = FoldPlan("kfold", int(np.asarray(fold_labels).size), description=description)
    plan.rounds.append(_partition_round(np.asarray(fold_labels, dtype=np.int64), folds))
    plan.split_round.extend((0, j) for j in range(folds))
    return plan


def analyse_moments(folds: Moments, basis: PolynomialBasis, spec, rows: int,
                    sample_folds: np.ndarray | None = None, notes: Iterable[str] = ()):
    """Sweep and recommend from per-fold summaries (streamed or from a cluster).

    Parameters
    ----------
    folds : one summary per fold (fold ``j`` validates split ``j``).
    basis : the design the summaries were formed on.
    spec : the request (`engine.spec.SweepSpec`, shuffled k-fold).
    rows : rows summarised.
    sample_folds : fold of each row of the sample the later steps use; the
        returned analysis's plan is over those rows.
    notes : sentences added to the analysis's notes.

    Returns
    -------
    `engine.analysis.Analysis`
    """
    from dataclasses import replace

    from .analysis import Analysis, with_paired_columns
    from .recommend import recommend
    from .rungs import order as order_rung
    from .sweep import check_design_size, split_summaries, sweep_summaries
    from .threads import one_thread

    spec.validate()
    check_design_size(basis)
    k = folds.n_sets
    empty = [j + 1 for j in range(k) if folds.n[j] == 0]
    if empty:
        raise InputProblem(f"Fold {empty[0]} received no rows; use fewer folds.",
                           code="too_few_rows")
    desc = (f"Shuffled {k}-fold cross-validation over {rows:,} rows, each row's fold a hash "
            f"of seed {spec.seed} and its row number (not scikit-learn's shuffle).")
    plan_all = hashed_fold_plan(np.zeros(0, np.int64), k, desc)
    A, a0 = basis.raw_map()
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(a0))):
        raise InputProblem(f"Raw powers up to order {basis.max_order} of these inputs are too "
                           "large to compute in double precision. Rescale the inputs or lower "
                           "the highest order.", code="values_too_large")
    summaries = split_summaries([folds], plan_all)
    term_sets = order_rung.term_sets(basis, spec.order_list())
    pen = np.asarray(spec.penalties, float)
    if pen.size == 0:   # a range fitted to the data (`engine.penalty_range`)
        from .penalty_range import data_penalties
        pen = np.asarray(data_penalties(*summaries[:3], A, a0, term_sets), float)
    with one_thread():
        res = sweep_summaries(summaries, term_sets, A, a0, pen, description=desc)
    table = res.validation_table()
    rec = recommend(table, res.split_errors(), float(np.mean(res.n_train)), spec.rule)
    table = with_paired_columns(table, rec)
    ran = spec if spec.penalties else replace(spec, penalties=tuple(float(p) for p in pen))
    plan = plan_all if sample_folds is None else hashed_fold_plan(sample_folds, k, desc)
    return Analysis(spec=ran, sweep=res, validation=table, recommendation=rec, basis=basis,
                    plan=plan, n_rows=int(rows), notes=list(res.notes) + list(notes),
                    request=spec if ran != spec else None)


def numeric_columns(path: str | Path) -> list[str]:
    """Numeric columns of a streamable table, from its schema or first block."""
    import pyarrow as pa

    kind, files = _files(Path(path))
    if kind == "parquet":
        import pyarrow.parquet as pq

        schema = pq.read_schema(files[0])
    else:
        import pyarrow.csv as pacsv

        with open(files[0], "rb") as handle:
            head = handle.read(65536).decode("utf-8", errors="replace")
        delimiter = "\t" if head.count("\t") > head.count(",") else ","
        reader = pacsv.open_csv(files[0], parse_options=pacsv.ParseOptions(delimiter=delimiter))
        schema = reader.schema
    return [f.name for f in schema
            if pa.types.is_floating(f.type) or pa.types.is_integer(f.type)]
