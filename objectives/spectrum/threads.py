"""Run dense linear algebra on one BLAS thread.

The solver factors many small (N ≲ 500) matrices; OpenBLAS threads buy nothing at that size
and, on a shared machine, busy-waiting threads slowed the test suite tenfold. The OpenBLAS
libraries that numpy and scipy loaded are found in /proc/self/maps (Linux) and their thread
count is set through ctypes for the duration of a block, then restored. Elsewhere this is a
no-op.
"""

from __future__ import annotations

import ctypes
from contextlib import contextmanager
from functools import lru_cache

_SUFFIXES = ("64_", "_64_", "", "_")


@lru_cache(maxsize=1)
def _controls() -> tuple[tuple[object, object], ...]:
    try:
        with open("/proc/self/maps") as maps:
            paths = {line.split()[-1] for line in maps if "openblas" in line.lower()}
    except OSError:
        return ()
    found = []
    for path in sorted(paths):
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for prefix in ("scipy_openblas", "openblas"):
            for suffix in _SUFFIXES:
                setter = getattr(lib, f"{prefix}_set_num_threads{suffix}", None)
                getter = getattr(lib, f"{prefix}_get_num_threads{suffix}", None)
                if setter is not None and getter is not None:
                    getter.restype = ctypes.c_int
                    found.append((setter, getter))
                    break
            else:
                continue
            break
    return tuple(found)


@contextmanager
def single_blas_thread():
    """Inside the block every loaded OpenBLAS uses one thread."""
    import numpy  # noqa: F401  (make sure the libraries are loaded before looking)
    import scipy.linalg  # noqa: F401

    controls = _controls()
    previous = [int(getter()) for _, getter in controls]
    for setter, _ in controls:
        setter(ctypes.c_int(1))
    try:
        yield
    finally:
        for (setter, _), n in zip(controls, previous):
            setter(ctypes.c_int(n))
