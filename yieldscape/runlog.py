"""A run's log: stage timings, the lines a run keeps for run.log and its report, and the
names of sensitivity cases in their lines. Logging goes to the ``yieldscape`` logger; the CLI
decides what reaches the terminal."""

from __future__ import annotations

import ctypes
import gc
import logging
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import TypeVar

log = logging.getLogger("yieldscape")


class Timer:
    """Times named stages of a run and logs their start and end."""

    def __init__(self) -> None:
        self.timings: dict[str, float] = {}

    @contextmanager
    def stage(self, name: str) -> Iterator[None]:
        log.info("%s ...", name)
        t0 = time.perf_counter()
        yield
        self.timings[name] = round(time.perf_counter() - t0, 4)
        log.info("%s done in %.2f s", name, self.timings[name])
        release_freed_memory()


def _malloc_trim():  # noqa: ANN202
    try:
        return ctypes.CDLL(None).malloc_trim  # glibc only
    except (AttributeError, OSError):
        return None


_TRIM = _malloc_trim() if sys.platform.startswith("linux") else None


def release_freed_memory() -> None:
    """Hand the memory a stage freed back to the system. glibc keeps freed blocks below its
    (self-raising) mmap threshold in the heap: at 1M stands a stage's temporaries left
    0.4-0.6 GB of resident memory that the next stage's peak stacked on. ``malloc_trim(0)``
    returns the free pages (a few ms); elsewhere this does nothing."""
    if _TRIM is not None:
        _TRIM(0)


T = TypeVar("T")


@contextmanager
def without_collector() -> Iterator[None]:
    """Python's cyclic collector off while the block runs (as it was after). Made for
    blocks that make a million objects that all live on (a layer's geometries): each
    tracked object counts toward the next collection, so the collector walked every object
    made so far again and again (7 full collections, 0.7-1.7 s, reading 1M polygons) and
    freed nothing."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def released(value: T) -> T:
    """``value``, once the memory freed while making it is back with the system."""
    release_freed_memory()
    return value


@contextmanager
def named_lines(prefix: str) -> Iterator[None]:
    """Begin every yieldscape log line with ``prefix`` while the block runs, so that a
    sensitivity case's lines (its warnings, its verdict) say whose they are."""

    def name(record: logging.LogRecord) -> bool:
        record.msg, record.args = prefix + record.getMessage(), ()
        return True

    logger = logging.getLogger("yieldscape")
    logger.addFilter(name)
    try:
        yield
    finally:
        logger.removeFilter(name)


class LogLines(logging.Handler):
    """Keeps the formatted records of a run in a list."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.lines: list[str] = []
        self.warnings: list[str] = []  # the messages of WARNING records and above
        self.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))

    def emit(self, record: logging.LogRecord) -> None:
        self.lines.append(self.format(record))
        if record.levelno >= logging.WARNING:
            self.warnings.append(record.getMessage())


@contextmanager
def captured_log() -> Iterator[LogLines]:
    """Collect the yieldscape logger's INFO and higher records while the block runs. A library
    caller who configured no logging still sees warnings on stderr, as without capture."""
    logger = logging.getLogger("yieldscape")
    capture = LogLines()
    extra: list[logging.Handler] = [capture]
    if not logger.handlers and not logging.getLogger().handlers:
        warn = logging.StreamHandler()
        warn.setLevel(logging.WARNING)
        extra.append(warn)
    level = logger.level
    if logger.getEffectiveLevel() > logging.INFO:
        logger.setLevel(logging.INFO)
    for h in extra:
        logger.addHandler(h)
    try:
        yield capture
    finally:
        for h in extra:
            logger.removeHandler(h)
        logger.setLevel(level)
