"""A small on-disk cache for results that depend only on an input file (the adjacency graph).

Entries live in ``$YIELDSCAPE_CACHE_DIR``, else ``$XDG_CACHE_HOME/yieldscape``, else
``~/.cache/yieldscape``, named by a SHA-256 key of the input file's bytes and the options, so a
changed file or option never reads a stale entry. A cache that cannot be written is skipped.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Callable
from pathlib import Path

import numpy as np

from yieldscape.io.outputs import sha256_file


def cache_dir() -> Path:
    if os.environ.get("YIELDSCAPE_CACHE_DIR"):
        return Path(os.environ["YIELDSCAPE_CACHE_DIR"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "yieldscape"


def cached_arrays(
    kind: str, source: Path, options: str, build: Callable[[], dict[str, np.ndarray]]
) -> tuple[dict[str, np.ndarray], bool]:
    """Arrays for (source file, options) from the cache, or built and stored; (arrays, hit)."""
    key = hashlib.sha256(f"{sha256_file(source)}|{options}".encode()).hexdigest()[:32]
    path = cache_dir() / f"{kind}-{key}.npz"
    if path.is_file():
        try:
            with np.load(path) as data:
                return {k: data[k] for k in data.files}, True
        except (OSError, ValueError):
            pass  # a damaged entry is rebuilt
    arrays = build()
    tmp = path.with_name(f".{path.name}.{os.getpid()}.partial.npz")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        np.savez(tmp, **arrays)
        os.replace(tmp, path)
    except OSError:
        pass
    finally:  # a full disk or an interrupt while saving leaves no part of an entry
        try:
            tmp.unlink(missing_ok=True)
        except OSError:
            pass
    return arrays, False
