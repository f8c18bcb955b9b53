"""Independent tasks (sensitivity cases, Monte Carlo replicates) on a Dask cluster.

:class:`Parallel` says where tasks run: in this process (the default), on a local cluster of
``workers`` processes started for the run, or on an existing ``dask.distributed`` cluster at
``scheduler``. :func:`pool` opens it for a block and gives a :class:`Pool` to submit to (or
``None`` in this process). Dask is imported only there, so a run without it neither needs nor
loads Dask.

Each task runs with the ``yieldscape`` logger's records kept and sends them back with its
value; :meth:`Pool.result` logs them here, so run.log has a task's lines as if it had run in
this process. A worker that dies is replaced and its tasks run again by the scheduler (up to
its ``distributed.scheduler.allowed-failures``, 3 by default); a task that raises is not
retried (the inputs would raise again) and its error is raised here.
"""

from __future__ import annotations

import contextlib
import importlib
import logging
import os
import threading
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from functools import partial
from typing import Any

from yieldscape.errors import InputError
from yieldscape.runlog import named_lines

log = logging.getLogger("yieldscape")

SCHEDULER_ENV = "YIELDSCAPE_SCHEDULER"
CONNECT_TIMEOUT_S = 10.0  # to reach an existing scheduler
INSTALL = 'pip install "yieldscape[parallel]"'


MAX_WORKERS = 256  # local worker processes, each a copy of the inputs


@dataclass(frozen=True)
class Parallel:
    """Where a run's independent tasks go: ``workers`` local processes, the cluster whose
    scheduler is at ``scheduler`` (e.g. ``tcp://10.0.0.5:8786``), or neither: this process.
    ``source`` names where the address came from, for messages."""

    workers: int | None = None
    scheduler: str | None = None
    source: str = "--scheduler"

    def __post_init__(self) -> None:
        w = self.workers
        if w is not None and (isinstance(w, bool) or not isinstance(w, int) or w < 1):
            raise InputError(f"--workers {w!r}: must be a whole number of processes >= 1")
        if w is not None and w > MAX_WORKERS:
            raise InputError(
                f"--workers {w}: at most {MAX_WORKERS} local processes (a local cluster's "
                "workers each hold the run's inputs; for more, use --scheduler)"
            )
        if self.scheduler is not None and not self.scheduler.strip():
            raise InputError(f"{self.source}: the scheduler address is empty")
        if w is not None and self.scheduler is not None:
            raise InputError(
                f"--workers {w} and {self.source} {self.scheduler!r}: --workers starts a "
                "local cluster, the scheduler address names an existing one; give one of them"
            )

    @classmethod
    def from_options(
        cls,
        workers: int | None = None,
        scheduler: str | None = None,
        environ: Mapping[str, str] = os.environ,
    ) -> Parallel:
        """The command's choice: ``--workers``, ``--scheduler``, else $YIELDSCAPE_SCHEDULER."""
        if workers is None and scheduler is None and environ.get(SCHEDULER_ENV):
            return cls(scheduler=environ[SCHEDULER_ENV], source=SCHEDULER_ENV)
        return cls(workers, scheduler)

    @property
    def serial(self) -> bool:
        return self.workers is None and self.scheduler is None


class _Records(logging.Handler):
    """The records of one thread (a worker may run tasks in several) as (level, message)."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.thread = threading.get_ident()
        self.items: list[tuple[int, str]] = []

    def emit(self, record: logging.LogRecord) -> None:
        if record.thread == self.thread:
            self.items.append((record.levelno, record.getMessage()))


def _logged(fn: Callable[..., Any], prefix: str, *args: Any) -> tuple[Any, list]:
    """On a worker: ``fn(*args)``, its yieldscape log lines (named with ``prefix``) kept
    rather than printed, returned beside its value."""
    logger = logging.getLogger("yieldscape")
    records = _Records()
    saved = logger.handlers[:], logger.propagate, logger.level
    logger.handlers[:], logger.propagate = [records], False
    logger.setLevel(logging.INFO)
    try:
        with named_lines(prefix) if prefix else _nothing():
            value = fn(*args)
    finally:
        logger.handlers[:], logger.propagate = saved[0], saved[1]
        logger.setLevel(saved[2])
    return value, records.items


@contextmanager
def _nothing() -> Iterator[None]:
    yield


class Pool:
    """A ``distributed.Client`` connected in a thread of its own (a local cluster takes
    seconds to start, which the run spends on its base case): tasks submitted meanwhile are
    sent once it is up, in order; large inputs shared and results collected through it.
    ``connect`` gives the client and the local cluster started for the run (or None)."""

    def __init__(self, connect: Callable[[], tuple[Any, Any]], warm: str | None = None) -> None:
        self.warming: list[Any] = []  # kept: a future let go may be cancelled
        self._sender = ThreadPoolExecutor(1, thread_name_prefix="dask-connect")
        self._started = self._sender.submit(self._start, connect, warm)
        self._closing: threading.Thread | None = None

    def _start(self, connect: Callable[[], tuple[Any, Any]], warm: str | None) -> tuple:
        client, cluster = connect()
        try:
            workers = list(client.scheduler_info(n_workers=-1)["workers"])
            log.info("Dask: %d workers; dashboard %s", len(workers), client.dashboard_link)
            if warm is not None:  # each worker imports it at once (seconds for a fresh one)
                self.warming = [
                    client.submit(importlib.import_module, warm, workers=[w], pure=False)
                    for w in workers
                ]
        except BaseException:
            client.close()
            if cluster is not None:
                cluster.close()
            raise
        return client, cluster

    @property
    def client(self) -> Any:
        """The connected client, once connected (the connection's error raised here)."""
        return self._started.result()[0]

    def connected(self) -> None:
        """Once connected; the connection's error (a scheduler not reached) raised here."""
        self._started.result()

    def close(self) -> None:
        """Disconnect and shut a local cluster down in a thread of its own (seconds of
        waiting on the workers' exit), beside what this process does next; the block of
        :func:`pool` waits for it at its end."""
        if self._closing is None:
            self._closing = threading.Thread(target=self._close, name="dask-close")
            self._closing.start()

    def _close(self) -> None:
        self._sender.shutdown(wait=True)  # the tasks still to send, sent
        if self._started.exception() is not None:
            return  # never connected: nothing to close
        client, cluster = self._started.result()
        client.close()
        if cluster is not None:
            cluster.close()

    def closed(self) -> None:
        """Closed and done closing; a connection that failed raises its error here, where
        the run never needed the pool (no case or replicate)."""
        self.close()
        assert self._closing is not None
        self._closing.join()
        self.connected()

    @property
    def threads(self) -> int:
        """The cluster's task slots (worker threads) now, at least 1."""
        info = self.client.scheduler_info(n_workers=-1)["workers"].values()
        return max(1, sum(w.get("nthreads", 1) for w in info))

    def share(self, value: Any) -> Any:
        """``value`` sent once to every worker; pass the returned future as a task argument."""
        return self.client.scatter([value], broadcast=True, hash=False)[0]

    def submit(self, fn: Callable[..., Any], *args: Any, prefix: str = "") -> Task:
        """``fn(*args)`` as a task (its log lines named with ``prefix``), sent as soon as
        the cluster is up."""
        return Task(self._sender.submit(self._send, fn, prefix, args))

    def _send(self, fn: Callable[..., Any], prefix: str, args: tuple) -> Any:
        return self.client.submit(_logged, fn, prefix, *args, pure=False)

    def map(self, fn: Callable[..., Any], items: Sequence[tuple], *shared: Any) -> list:
        """``[fn(*item, *shared) for item in items]`` as tasks, in the items' order."""
        tasks = [self.submit(fn, *item, *shared) for item in items]
        return [t.result() for t in tasks]


class Task:
    """A submitted task: the ``distributed.Future`` it becomes once sent."""

    def __init__(self, sent: Future) -> None:
        self.sent = sent

    def result(self) -> Any:
        """The task's value, once its log lines are logged here."""
        value, records = self.sent.result().result()
        for level, message in records:
            log.log(level, "%s", message)
        return value


@contextmanager
def pool(settings: Parallel, warm: str | None = None) -> Iterator[Pool | None]:
    """A :class:`Pool` on the chosen cluster for the block (closed after it, a local cluster
    shut down), or ``None`` for this process alone. The cluster starts (or the scheduler is
    reached) beside the block; each worker then imports the module ``warm`` at once. An
    unreachable scheduler or a missing Dask is raised where the block first needs the pool,
    else at its end."""
    if settings.serial:
        yield None
        return
    tasks = Pool(partial(_connect, settings), warm)
    try:
        yield tasks
    except BaseException:
        with contextlib.suppress(Exception):  # the block's own error is the one to raise
            tasks.closed()
        raise
    tasks.closed()


def _connect(settings: Parallel) -> tuple[Any, Any]:
    flag = "--workers" if settings.workers is not None else settings.source
    try:
        import dask
        from distributed import Client
    except ImportError as exc:
        raise InputError(f"{flag} needs Dask ({exc}): {INSTALL}") from None
    if settings.workers is not None:
        with dask.config.set({_SPAWN_ENV: _spawn_environ()}):
            cluster = _local_cluster(settings.workers)
        try:
            return Client(cluster), cluster
        except BaseException:
            cluster.close()
            raise
    address = settings.scheduler
    try:
        return Client(address, timeout=CONNECT_TIMEOUT_S), None
    except Exception as exc:  # refused, timed out, malformed, or something else answering
        raise InputError(
            f"{flag} {address!r}: no Dask scheduler reached within {CONNECT_TIMEOUT_S:g} s "
            f"({type(exc).__name__}: {exc}); check the address, or start one with "
            "`dask scheduler`"
        ) from None


_SPAWN_ENV = "distributed.nanny.pre-spawn-environ"


def _spawn_environ() -> dict:
    """Dask's environment for new worker processes without ``MALLOC_TRIM_THRESHOLD_``: set, it
    turns off glibc's rising mmap threshold, so every large array is mapped afresh and paged
    in again (page faults at ~0.5 GB/s on these machines): Monte Carlo replicates ran 2.6x
    slower on one worker than in one process. One thread per math library stays."""
    import dask

    env = dict(dask.config.get(_SPAWN_ENV, default={}) or {})
    env.pop("MALLOC_TRIM_THRESHOLD_", None)
    return env


def _local_cluster(workers: int) -> Any:
    from distributed import LocalCluster

    return LocalCluster(
        n_workers=workers,
        processes=True,
        threads_per_worker=1,
        dashboard_address=":0",  # any free port: several runs may share a machine
        # the workers' own logs: a heartbeat cut by the shutdown is printed as an ERROR
        # traceback; a task's error comes back through its future, a dead worker's task
        # is rerun (and fails the run after the allowed failures)
        silence_logs=logging.CRITICAL,
    )
