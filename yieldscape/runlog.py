"""A run's log: stage timings, the lines a run keeps for run.log and its report, and the
names of sensitivity cases in their lines. Logging goes to the ``yieldscape`` logger; the CLI
decides what reaches the terminal."""

from __future__ import annotations

import logging
import time
from collections.abc import Iterator
from contextlib import contextmanager

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
