"""BLAS thread limits (`engine.threads`) checked against threadpoolctl's own report."""
from __future__ import annotations

import numpy as np
import pytest

threadpoolctl = pytest.importorskip("threadpoolctl")

from engine import threads  # noqa: E402


def _blas_threads() -> dict[str, int]:
    """Threads of every loaded BLAS library, from a fresh threadpoolctl scan."""
    return {d["filepath"]: d["num_threads"] for d in threadpoolctl.threadpool_info()
            if d["user_api"] == "blas"}


def test_controller_holds_numpy_and_scipy_blas():
    import scipy.linalg  # noqa: F401  (scipy ships its own BLAS)

    ours = {lib.filepath for lib in threads.blas_controller().lib_controllers
            if lib.user_api == "blas"}
    # threadpoolctl's own scan of the process is the reference
    assert ours == set(_blas_threads())
    assert ours, "numpy's BLAS should be found"


@pytest.mark.parametrize("limit", [threads.one_thread, lambda: threads.blas_threads(1)])
def test_one_thread_limits_every_blas_and_restores(limit):
    before = _blas_threads()
    with limit():
        inside = _blas_threads()
        np.linalg.qr(np.random.default_rng(0).normal(size=(50, 5)))
    assert set(inside) == set(before)
    assert all(n == 1 for n in inside.values()), inside
    assert _blas_threads() == before


def test_nested_limits_restore_the_outer_one():
    before = _blas_threads()
    with threads.blas_threads(2):
        outer = _blas_threads()
        with threads.one_thread():
            assert all(n == 1 for n in _blas_threads().values())
        assert _blas_threads() == outer
    assert _blas_threads() == before


def test_libraries_are_scanned_once(monkeypatch):
    threads.blas_controller()          # made (at most) here
    made = []
    real = threadpoolctl.ThreadpoolController.__init__

    def counting(self, *a, **k):
        made.append(1)
        real(self, *a, **k)

    monkeypatch.setattr(threadpoolctl.ThreadpoolController, "__init__", counting)
    for _ in range(5):
        with threads.one_thread():
            pass
        with threads.blas_threads(2):
            pass
    assert made == []
