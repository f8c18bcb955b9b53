"""The compiler wrapper (schedule/_jit.py): a read-only install still runs the compiled loops.

numba raises RuntimeError ("cannot cache function ...: no locator available") at decoration
when ``cache=True`` finds no folder it can write (numba.core.caching.CacheImpl); the wrapper
must then compile without a cache instead of failing at import.
"""

import numba
import numpy as np
from numba.core import caching

from yieldscape.schedule._jit import jit


def _running_sum(a):
    out = 0.0
    for x in a:
        out += x
    return out


def test_without_a_writable_cache_folder_the_loop_is_compiled_uncached(monkeypatch):
    monkeypatch.setattr(caching.CacheImpl, "_locator_classes", [])  # no folder anywhere
    f = jit(_running_sum)
    assert isinstance(f, numba.core.registry.CPUDispatcher)
    assert isinstance(f._cache, caching.NullCache)
    assert f(np.array([0.5, 0.25, 0.125])) == 0.875


def test_with_a_cache_folder_the_loop_is_cached(monkeypatch, tmp_path):
    monkeypatch.setattr(numba.config, "CACHE_DIR", str(tmp_path))  # as NUMBA_CACHE_DIR
    f = jit(_running_sum)
    assert f(np.array([1.0, 2.0])) == 3.0
    assert any(p.suffix == ".nbi" for p in tmp_path.rglob("*"))  # the index of the cache
