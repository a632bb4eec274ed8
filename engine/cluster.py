"""Sweeps of tables that live on a Dask cluster.

The per-batch kernel of `engine.streaming` (`batch_moments`) is mapped over the
partitions of a Dask DataFrame (``read_parquet`` / ``read_csv``, any path or
fsspec URL the workers can read); the per-fold summaries it returns are
merged with `merge_moments` (pairwise updates, exact), and everything after
that runs locally (`engine.streaming.analyse_moments`). Fold assignment is the
same hash of seed and row number as for streamed files, so a cluster run and a
streamed run of the same table give the same folds.

Dask is an optional extra (``pip install fitladder[cluster]``); nothing else
in the engine imports this module.
"""
from __future__ import annotations


import numpy as np

from .design import PolynomialBasis
from .errors import InputProblem
from .moments import Moments
from .streaming import (StreamedStatistics, batch_moments, merge_moments, row_folds,
                        row_sample_mask)


def _dask():
    try:
        import dask
        import dask.dataframe as dd
        import distributed
    except ImportError:
        raise InputProblem("--cluster needs Dask: install the optional extra with "
                           "'pip install fitladder[cluster]' (dask and distributed).",
                           code="missing_dependency") from None
    return dask, dd, distributed


def read_frame(data: str):
    """A Dask DataFrame of ``data``: Parquet (file, folder or URL) or CSV."""
    _, dd, _ = _dask()
    text = str(data)
    low = text.lower().rstrip("/")
    try:
        if low.endswith((".csv", ".tsv", ".txt")) or low.endswith(".csv*"):
            return dd.read_csv(text, sep="\t" if low.endswith(".tsv") else ",")
        return dd.read_parquet(text)
    except Exception as exc:
        raise InputProblem(f"Dask could not read '{text}' ({type(exc).__name__}: "
                           f"{str(exc).splitlines()[0] if str(exc) else ''}).",
                           code="unreadable") from None


def numeric_columns(data: str) -> list[str]:
    """Numeric columns of a table Dask can read."""
    frame = read_frame(data)
    return [c for c, t in frame.dtypes.items() if np.issubdtype(t, np.number)]


def connect(address: str):
    """A Dask client: ``local`` starts a small local cluster (2 workers, 1 thread each)."""
    _, _, distributed = _dask()
    if address == "local":
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1,
                                           processes=True, dashboard_address=None)
        return distributed.Client(cluster)
    try:
        return distributed.Client(address, timeout="20s")
    except Exception as exc:
        raise InputProblem(f"Could not reach the Dask scheduler at '{address}' ({exc}). Check "
                           "the address, or use --cluster local.", code="no_cluster") from None


# ---------------------------------------------------------------------------
# kernels run on the workers (module-level functions, so they pickle)
# ---------------------------------------------------------------------------
def _clean(part, names):
    values = part[names].to_numpy(dtype=float, na_value=np.nan)
    ok = np.isfinite(values).all(axis=1)
    return values, ok


def _ranges(part, inputs, target):
    values, ok = _clean(part, list(inputs) + [target])
    X = values[ok, :-1]
    if not len(X):
        d = len(inputs)
        return np.full(d, np.inf), np.full(d, -np.inf), int(ok.size), 0
    return X.min(axis=0), X.max(axis=0), int(ok.size), int(ok.sum())


def _summarise(part, start, inputs, target, basis, folds, seed, share):
    values, ok = _clean(part, list(inputs) + [target])
    rows = np.arange(start, start + ok.size, dtype=np.int64)[ok]
    X, y = values[ok, :-1], values[ok, -1]
    lab = row_folds(rows, folds, seed)
    st = batch_moments(X, y, lab, basis, folds) if y.size else Moments.empty(
        folds, basis.n_terms + 1)
    keep = row_sample_mask(rows, share, seed)
    return st, X[keep], y[keep], rows[keep], lab[keep]


def _merge_all(parts):
    acc = parts[0]
    for p in parts[1:]:
        acc = merge_moments(acc, p)
    return acc


def cluster_statistics(address: str, data: str, target: str, inputs: list[str], spec,
                       sample_rows: int = 100_000, progress=None,
                       client=None) -> StreamedStatistics:
    """Per-fold summaries of ``data`` computed on a Dask cluster.

    Parameters
    ----------
    address : scheduler address, or ``local`` for a local cluster.
    data : path or URL of the table (Parquet or CSV) as the workers see it.
    target, inputs : columns.
    spec : the request (`engine.spec.SweepSpec`, shuffled k-fold).
    sample_rows : size of the seeded sample returned for the later steps.
    client : an existing ``distributed.Client`` (``address`` is then ignored).

    Returns
    -------
    `engine.streaming.StreamedStatistics`
    """
    dask, _, _ = _dask()
    own = client is None
    client = connect(address) if own else client
    try:
        frame = read_frame(data)
        missing = [c for c in list(inputs) + [target] if c not in frame.columns]
        if missing:
            raise InputProblem(f"'{data}' has no column {', '.join(missing)}.",
                               code="missing_column", column=missing[0])
        parts = frame.to_delayed()
        if progress:
            progress(0.0, f"Cluster: ranges of the inputs over {len(parts)} partitions")
        ranges = dask.compute(*[dask.delayed(_ranges)(p, inputs, target) for p in parts])
        lo = np.min([r[0] for r in ranges], axis=0)
        hi = np.max([r[1] for r in ranges], axis=0)
        lengths = [r[2] for r in ranges]
        rows_read, rows_used = int(sum(lengths)), int(sum(r[3] for r in ranges))
        folds = int(spec.scheme.folds)
        if rows_used < folds + 1:
            raise InputProblem(f"Only {rows_used} usable rows were found.", code="too_few_rows")
        basis = PolynomialBasis.fit(np.vstack([lo, hi]), inputs, max(spec.order_list()),
                                    spec.interactions)
        share = min(1.0, sample_rows / rows_used)
        starts = np.r_[0, np.cumsum(lengths)[:-1]]
        b = dask.delayed(basis, pure=True)
        if progress:
            progress(0.1, "Cluster: summarising partitions")
        outs = dask.compute(*[dask.delayed(_summarise)(p, int(s), inputs, target, b, folds,
                                                       int(spec.seed), share)
                              for p, s in zip(parts, starts)])
    finally:
        if own:
            cluster = getattr(client, "cluster", None)
            client.close()
            if cluster is not None:
                cluster.close()
    acc = _merge_all([o[0] for o in outs])
    d = len(inputs)
    stats = StreamedStatistics(
        basis, acc, rows_read, rows_used,
        np.vstack([o[1] for o in outs]) if outs else np.zeros((0, d)),
        np.concatenate([o[2] for o in outs]), np.concatenate([o[3] for o in outs]),
        np.concatenate([o[4] for o in outs]))
    where = "a local Dask cluster" if address == "local" else f"the Dask cluster at {address}"
    stats.notes.append(
        f"The per-fold summaries of all {rows_used:,} usable rows were computed on {where} "
        f"({len(lengths)} partitions) and merged; {rows_read - rows_used:,} rows with a "
        "missing or non-finite value were left out.")
    stats.notes.append(
        f"Folds: fold = hash(seed {spec.seed}, row number) mod {folds}, reproducible from the "
        "seed and the row number; this is not scikit-learn's shuffle.")
    stats.notes.append(
        f"Side-by-side fits, learning curve, warning checks and charts use a seeded sample "
        f"of {stats.sample_y.size:,} rows.")
    return stats
