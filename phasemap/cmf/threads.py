"""Limit the BLAS thread pools (numpy's and scipy's OpenBLAS) while the cluster solver runs.

The cluster solver does many small matrix-vector products and small dense
diagonalisations; multithreaded BLAS only adds synchronisation overhead there (a factor
2-4 slower on a loaded 2-core machine, measured). Without ``threadpoolctl`` we call the
OpenBLAS libraries that numpy and scipy ship, through their exported
``*_set_num_threads`` functions; if none is found this is a no-op.
"""

from __future__ import annotations

import contextlib
import ctypes

__all__ = ["blas_threads"]

_LIBS: list | None = None


def _find():
    global _LIBS
    if _LIBS is not None:
        return _LIBS
    import numpy  # noqa: F401  (load the libraries)
    import scipy.linalg  # noqa: F401

    found = []
    try:
        with open("/proc/self/maps") as maps:
            paths = {line.split()[-1] for line in maps if "openblas" in line.lower()}
    except OSError:  # pragma: no cover - not Linux
        paths = set()
    for p in sorted(paths):
        try:
            lib = ctypes.CDLL(p)
        except OSError:  # pragma: no cover
            continue
        for suffix in ("64_", ""):
            for pre in ("scipy_openblas", "openblas"):
                g, s = getattr(lib, f"{pre}_get_num_threads{suffix}", None), getattr(lib, f"{pre}_set_num_threads{suffix}", None)
                if g is not None and s is not None:
                    g.restype = ctypes.c_int
                    found.append((g, s))
                    break
            else:
                continue
            break
    _LIBS = found
    return found


@contextlib.contextmanager
def blas_threads(n: int | None = 1):
    """Context manager: run the body with ``n`` BLAS threads (None: leave unchanged)."""
    if n is None:
        yield
        return
    libs = _find()
    old = [g() for g, _ in libs]
    try:
        for _, s in libs:
            s(ctypes.c_int(int(n)))
        yield
    finally:
        for (_, s), k in zip(libs, old):
            s(ctypes.c_int(int(k)))
