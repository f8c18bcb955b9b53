"""Giving freed memory back to the system between stages (glibc's malloc_trim), checked
against the kernel's own count of the process's resident pages (/proc/self/statm)."""

import gc
import sys

import numpy as np
import pytest

from yieldscape import runlog


def resident_bytes() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * 4096  # pages of 4 KiB on the project's machines


@pytest.mark.skipif(
    not sys.platform.startswith("linux") or runlog._TRIM is None, reason="glibc only"
)
def test_freed_heap_blocks_go_back_to_the_system():
    # freeing a 16 MB block raises glibc's mmap threshold to 16 MB (mallopt(3), "dynamic
    # mmap threshold"), so the 2 MB blocks after it land on the heap, where free() keeps them
    big = np.ones(2_000_000)
    del big
    blocks = [np.ones(250_000) for _ in range(100)]
    top = blocks[-1]  # pins the heap's top: the 198 MB below it cannot shrink away by itself
    del blocks
    before = resident_bytes()
    runlog.release_freed_memory()
    assert before - resident_bytes() > 100e6
    assert top.sum() == 250_000


def test_without_collector_makes_objects_without_a_collection_and_restores_the_collector():
    # gc.callbacks report every collection (Python docs, gc module); a thousand lists that
    # live on would trigger one (the youngest generation's threshold is 700 by default)
    seen = []

    def count(phase: str, info: dict) -> None:
        if phase == "start":
            seen.append(info["generation"])

    gc.callbacks.append(count)
    try:
        with runlog.without_collector():
            seen.clear()  # (one may have run just before the block)
            kept = [[i] for i in range(20_000)]
            inside = list(seen)  # (the collector runs once on leaving, as it is enabled again)
        assert not inside and len(kept) == 20_000
        assert gc.isenabled()
        gc.disable()  # off before: left off
        with runlog.without_collector():
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()
        gc.callbacks.remove(count)
