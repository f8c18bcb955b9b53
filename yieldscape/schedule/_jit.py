"""Numba's compiler for the few loops that must run one element at a time (the spatial pick).

Compiled code is cached on disk (``cache=True``): in ``NUMBA_CACHE_DIR`` when set, else beside
the source (``__pycache__``), else in the user's cache folder. Where none of these can be
written (a read-only install without a writable home), the loops are compiled again in each
process (about 4 s) instead of failing at import.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numba

# error_model="numpy": a float division by zero gives inf or nan, as numpy's, not an exception
_OPTIONS: dict[str, Any] = {"error_model": "numpy", "nogil": True}


def jit(fn: Callable) -> Callable:
    """``fn`` compiled with numba on its first call, cached on disk where possible."""
    try:
        return numba.njit(cache=True, **_OPTIONS)(fn)
    except RuntimeError:  # "no locator available": nowhere to write the cache
        return numba.njit(**_OPTIONS)(fn)
