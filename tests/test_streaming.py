"""Streamed and cluster statistics against in-memory statistics of the same rows."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from engine import SchemeSpec, SweepSpec
from engine.cli import main
from engine.design import PolynomialBasis
from engine.streaming import (accumulate_batches, analyse_moments, hashed_fold_plan,
                              row_folds, stream_statistics)
from engine.sweep import piece_statistics, run_sweep


def _table(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    X = rng.uniform(-3, 5, size=(n, 2)) + [100.0, 0.0]
    y = 0.5 * X[:, 0] - X[:, 1] ** 2 + rng.normal(0, 0.5, n)
    return pd.DataFrame({"a": X[:, 0], "b": X[:, 1], "y": y})


@settings(max_examples=25, deadline=None)
@given(n=st.integers(5, 300), cuts=st.lists(st.integers(0, 300), max_size=8),
       order=st.integers(0, 4), seed=st.integers(0, 10**6))
def test_any_chunking_gives_the_in_memory_statistics(n, cuts, order, seed):
    f = _table(n, seed)
    X, y = f[["a", "b"]].to_numpy(), f["y"].to_numpy()
    basis = PolynomialBasis.fit(X, ("a", "b"), order, interactions=True)
    labels = row_folds(np.arange(n), 4, seed)
    whole = piece_statistics(basis, X, y, labels, 4)
    bounds = sorted({0, n, *[c for c in cuts if c < n]})
    streamed = accumulate_batches(((X[a:b], y[a:b], labels[a:b])
                                   for a, b in zip(bounds[:-1], bounds[1:])), basis, 4)
    np.testing.assert_array_equal(streamed.n, whole.n)
    scale = np.abs(whole.comoment).max() + 1.0
    np.testing.assert_allclose(streamed.mean, whole.mean, rtol=1e-11, atol=1e-11 * scale)
    np.testing.assert_allclose(streamed.comoment, whole.comoment, rtol=1e-9, atol=1e-11 * scale)


def test_folds_depend_only_on_seed_and_row_number():
    rows = np.arange(100_000)
    a = row_folds(rows, 7, 3)
    b = np.concatenate([row_folds(rows[i:i + 999], 7, 3) for i in range(0, rows.size, 999)])
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, row_folds(rows, 7, 4))
    counts = np.bincount(a, minlength=7)
    assert counts.min() > 0.95 * rows.size / 7 and counts.max() < 1.05 * rows.size / 7


@pytest.mark.parametrize("kind", ["csv", "parquet", "folder"])
def test_streamed_file_gives_the_sweep_of_the_whole_table(kind, tmp_path):
    f = _table(3000, seed=1)
    f.loc[17, "b"] = np.nan                     # one row with a gap: left out and counted
    if kind == "csv":
        path = tmp_path / "t.csv"
        f.to_csv(path, index=False)
    elif kind == "parquet":
        path = tmp_path / "t.parquet"
        f.to_parquet(path)
    else:
        path = tmp_path / "parts"
        path.mkdir()
        for i, a in enumerate(range(0, 3000, 700)):
            f.iloc[a:a + 700].to_parquet(path / f"part{i:02d}.parquet")
    spec = SweepSpec("y", ("a", "b"), max_order=3, scheme=SchemeSpec("kfold", folds=5), seed=9)
    stats = stream_statistics(path, "y", ["a", "b"], 3, False, 5, 9, sample_rows=500,
                              batch_rows=256)
    assert (stats.rows_read, stats.rows_used) == (3000, 2999)
    streamed = analyse_moments(stats.folds, stats.basis, spec, stats.rows_used,
                               stats.sample_folds, stats.notes)
    # in memory: the same rows, the same hashed folds, the ordinary sweep
    keep = f.notna().all(axis=1).to_numpy()
    X, y = f.loc[keep, ["a", "b"]].to_numpy(), f.loc[keep, "y"].to_numpy()
    labels = row_folds(np.flatnonzero(keep), 5, 9)
    basis = PolynomialBasis.fit(X, ("a", "b"), 3)
    whole = run_sweep(X, y, basis, hashed_fold_plan(labels, 5, ""), [0, 1, 2, 3],
                      streamed.spec.penalties)      # the grid the streamed sweep ran
    np.testing.assert_allclose(streamed.sweep.valid_mse, whole.valid_mse, rtol=1e-9)
    np.testing.assert_allclose(streamed.sweep.train_mse, whole.train_mse, rtol=1e-9)
    assert 300 < stats.sample_y.size < 700
    assert any("not scikit-learn's shuffle" in n for n in streamed.notes)


def test_command_line_streams_a_folder_of_parquet_files(tmp_path, capsys):
    f = _table(4000, seed=2)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i in range(4):
        f.iloc[i * 1000:(i + 1) * 1000].to_parquet(folder / f"p{i}.parquet")
    status = main(["run", str(folder), "--target", "y", "--max-order", "3", "--sample-rows",
                   "800", "--out", str(tmp_path / "pack")])
    assert status == 0, capsys.readouterr().err
    summary = json.loads((tmp_path / "pack" / "summary.json").read_text())
    text = json.dumps(summary)
    assert "hash(seed 0, row number)" in text and "seeded sample" in text
    assert summary["recommended"]["order"] == 2    # y is quadratic in b
    md = (tmp_path / "pack" / "summary.md").read_text()
    page = (tmp_path / "pack" / "summary.html").read_text()
    for text in (md, page):                        # the one-page summary says which rows
        assert "record batches" in text and "seeded sample" in text
    status = main(["run", str(folder), "--target", "y", "--scheme", "blocked",
                   "--out", str(tmp_path / "pack2")])
    assert status == 2 and "kfold only" in capsys.readouterr().err



@pytest.mark.parametrize("kind", ["csv", "folder"])
def test_streamed_pack_records_a_fingerprint_and_reruns(kind, tmp_path, capsys):
    import hashlib

    f = _table(3000, seed=4)
    if kind == "csv":
        source = tmp_path / "log.csv"
        f.to_csv(source, index=False)
        # the file's own SHA-256 (hashlib, the standard library's reference)
        want = hashlib.sha256(source.read_bytes()).hexdigest()
    else:
        source = tmp_path / "parts"
        source.mkdir()
        for i in range(3):
            f.iloc[i * 1000:(i + 1) * 1000].to_parquet(source / f"p{i}.parquet")
        want = None
    out = tmp_path / "pack"
    assert main(["run", str(source), "--stream", "--target", "y", "--max-order", "3",
                 "--sample-rows", "700", "--out", str(out)]) == 0, capsys.readouterr().err
    rec = json.loads((out / "record.json").read_text())
    sha = rec["data"]["sha256"]
    assert isinstance(sha, str) and len(sha) == 64
    if want is not None:
        assert sha == want
    assert rec["load_options"]["stream"] is True and rec["load_options"]["sample_rows"] == 700
    again = tmp_path / "again"
    assert main(["rerun", str(out / "record.json"), "--data", str(source), "--out",
                 str(again)]) == 0, capsys.readouterr().err
    assert (again / "summary.json").read_bytes() == (out / "summary.json").read_bytes()
    # one changed value in one file: the fingerprint no longer matches and nothing is read
    if kind == "csv":
        source.write_text(source.read_text().replace("\n", "\n", 1) + "\n")
    else:
        g = f.iloc[1000:2000].copy()
        g.iloc[0, 0] += 1.0
        g.to_parquet(source / "p1.parquet")
    capsys.readouterr()
    assert main(["rerun", str(out / "record.json"), "--data", str(source), "--out",
                 str(tmp_path / "third")]) == 2
    err = capsys.readouterr().err
    assert "not the one recorded" in err and "--data" in err
    assert not (tmp_path / "third" / "summary.json").exists()

@pytest.mark.cluster
def test_dask_partitions_give_the_streamed_statistics(tmp_path):
    distributed = pytest.importorskip("distributed")
    from engine.cluster import cluster_statistics

    f = _table(2500, seed=3)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i in range(5):
        f.iloc[i * 500:(i + 1) * 500].to_parquet(folder / f"p{i}.parquet")
    spec = SweepSpec("y", ("a", "b"), max_order=3, scheme=SchemeSpec("kfold", folds=4), seed=5)
    local = stream_statistics(folder, "y", ["a", "b"], 3, False, 4, 5, sample_rows=300)
    with distributed.Client(processes=False, n_workers=2, threads_per_worker=1,
                            dashboard_address=None) as client:
        remote = cluster_statistics("local", str(folder), "y", ["a", "b"], spec,
                                    sample_rows=300, client=client)
    np.testing.assert_array_equal(remote.folds.n, local.folds.n)
    np.testing.assert_allclose(remote.folds.comoment, local.folds.comoment, rtol=1e-12,
                               atol=1e-12 * np.abs(local.folds.comoment).max())
    np.testing.assert_array_equal(np.sort(remote.sample_rows), np.sort(local.sample_rows))
    a = analyse_moments(remote.folds, remote.basis, spec, remote.rows_used)
    b = analyse_moments(local.folds, local.basis, spec, local.rows_used)
    np.testing.assert_allclose(a.sweep.valid_mse, b.sweep.valid_mse, rtol=1e-12)
