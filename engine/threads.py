"""How many BLAS threads each kind of work gets.

Most of the engine's linear algebra is many small factorisations (one
eigen-decomposition per order and split, QR of candidate designs); on a
machine whose cores are busy, BLAS threads spend far longer coordinating than
computing (measured on a loaded 2-core machine: one eigen-decomposition 17x
and a 1e6 x 21 cross-product 45x slower with two threads than with one). So
the engine runs on one BLAS thread, and only the large cross-products of the
row pass (`engine.moments`) get more, as many as there are idle cores.

``FITLADDER_BLAS_THREADS`` (a whole number) overrides the choice for the
large products.
"""
from __future__ import annotations

import os
from contextlib import contextmanager
from functools import lru_cache
from typing import Iterator


@lru_cache(maxsize=None)
def blas_controller():
    """The process's one `threadpoolctl.ThreadpoolController` (None without threadpoolctl).

    Making a controller scans every shared library the process has loaded
    (tens of milliseconds once scientific libraries are loaded), which
    ``threadpool_limits`` does on every call; this one is made on first use
    and kept. numpy and ``scipy.linalg`` are imported first so that the BLAS
    libraries the engine's linear algebra runs on (scipy ships its own) are
    both in it.
    """
    try:  # scikit-learn depends on threadpoolctl; it is also a direct requirement
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover
        return None
    import numpy  # noqa: F401
    import scipy.linalg  # noqa: F401

    return ThreadpoolController()


def available_cores() -> int:
    """Cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def product_threads() -> int:
    """BLAS threads for one large product: the cores not already busy (at least 1).

    Busy cores are estimated from the one-minute load average, so on a shared
    machine under load the answer is 1.
    """
    env = os.environ.get("FITLADDER_BLAS_THREADS", "").strip()
    if env.isdigit() and int(env) > 0:
        return int(env)
    cores = available_cores()
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # pragma: no cover
        load = 0.0
    return max(1, min(cores, int(cores - load + 0.5)))


@contextmanager
def blas_threads(n: int) -> Iterator[None]:
    """Limit BLAS to ``n`` threads inside the block (process-wide; restored after)."""
    controller = blas_controller()
    if controller is None:  # pragma: no cover
        yield
        return
    with controller.limit(limits=max(1, int(n)), user_api="blas"):
        yield


def one_thread():
    """BLAS on one thread: for many small factorisations."""
    return blas_threads(1)
