"""Numbered jobs shared between this process and a forked helper process, so that the second
core works on them while this one does something else (a run draws its figures beside its
GeoPackage writes).

:func:`shared_jobs` forks the helper on entry; it starts on the jobs at once, taking them one
at a time in number order from a pipe filled with their numbers before the fork (a read of one
byte from a pipe is atomic, so each number goes to one process only). The block runs this
process's own work; ``finish()`` then takes the jobs still left, waits for the helper and
returns both processes' results. An error in the helper is raised here, with its traceback as
the cause, as :mod:`concurrent.futures` does. Leaving the block any other way (an error, Ctrl-C,
SIGTERM raised as an exception) kills the helper and waits for it, so nothing it writes
outlives the block and the caller can remove what was written. Where ``fork`` is not the way
(not Linux) or there is nothing to share, every job runs here in ``finish()``.
"""

from __future__ import annotations

import contextlib
import ctypes
import gc
import os
import pickle
import signal
import sys
import traceback
import warnings
from collections.abc import Callable, Iterator
from typing import TypeVar

from yieldscape.errors import OutputError

T = TypeVar("T")
Claim = Callable[[], "int | None"]  # the next job's number, None when none is left

FORK = sys.platform.startswith("linux") and hasattr(os, "fork")
_ENDING = {signal.SIGINT, signal.SIGTERM}  # the signals that end a run
MAX_JOBS = 255  # one byte per job number
_PR_SET_PDEATHSIG = 1


class _RemoteTraceback(Exception):
    """The helper's traceback, as the cause of its error raised here."""

    def __str__(self) -> str:
        return self.args[0]


def _claimer(fd: int) -> Claim:
    def claim() -> int | None:
        try:
            byte = os.read(fd, 1)
        except BlockingIOError:  # empty: every job has been taken
            return None
        return byte[0] if byte else None

    return claim


def _in_helper(parent: int, tokens: int, out: int, work: Callable[[Claim], T]) -> None:
    """The helper's life: do jobs, send back the result or the error, leave at once (no
    atexit handlers, no flushing of the parent's buffers, no ``finally`` of the parent's)."""
    status = 0
    try:
        # a signal ends the helper at once; the parent cleans up after it. If the parent
        # dies, so does the helper (Linux), and it never outlives a parent already gone.
        signal.signal(signal.SIGINT, signal.SIG_DFL)
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        signal.pthread_sigmask(signal.SIG_UNBLOCK, _ENDING)  # blocked over the fork
        with contextlib.suppress(OSError, AttributeError):
            ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
        if os.getppid() != parent:
            os._exit(1)
        try:
            payload = ("done", work(_claimer(tokens)))
        except Exception as exc:
            tb = "".join(traceback.format_exception(exc))
            try:
                pickle.loads(pickle.dumps(exc))  # as the parent will
                payload = ("error", pickle.dumps(exc), tb)
            except Exception:  # an error that does not pickle and unpickle: its text
                payload = ("error", pickle.dumps(RuntimeError(f"{type(exc).__name__}: {exc}")), tb)
        data = pickle.dumps(payload)
        with os.fdopen(out, "wb") as pipe:
            pipe.write(data)
    except BaseException:
        status = 1
    finally:
        os._exit(status)


@contextlib.contextmanager
def shared_jobs(
    jobs: int, work: Callable[[Claim], T], what: str, fork_one: bool = False
) -> Iterator[Callable[[], list[T]]]:
    """Jobs ``0 .. jobs-1`` done by ``work(claim)`` (which calls ``claim()`` until it returns
    None) in a helper process beside the block and, in ``finish()``, in this one. ``finish``
    returns the results of ``work`` in both processes (this one's first); ``what`` names the
    work in the message should the helper die without a word (killed from outside). A single
    job is done here in ``finish()`` unless ``fork_one`` (the block has work of its own)."""
    if jobs > MAX_JOBS:
        raise ValueError(f"at most {MAX_JOBS} jobs")
    if not FORK or jobs < (1 if fork_one else 2):
        yield lambda: [work(_serial(jobs))]
        return
    tokens, fill = os.pipe()
    os.write(fill, bytes(range(jobs)))
    os.close(fill)
    os.set_blocking(tokens, False)
    back, out = os.pipe()
    parent = os.getpid()
    sys.stdout.flush()
    sys.stderr.flush()
    # the objects of both processes out of the cyclic collector's reach until the helper is
    # gone: a collection walks every tracked object, writing to its header, and each page so
    # written is copied (the helper copied 0.37 GB of pages of a run at 1M stands without)
    gc.freeze()
    # SIGINT and SIGTERM held over the fork: one arriving inside it ran its handler in the
    # fork's after-fork hooks (logging's), where its exception is printed and dropped, and
    # the run went on; held, it arrives where the helper is killed after it (below), and in
    # the helper once its handlers are the default ones
    mask = signal.pthread_sigmask(signal.SIG_BLOCK, _ENDING)
    try:
        with warnings.catch_warnings():
            # Python 3.12+ warns of any fork of a process with threads; ours are native
            # libraries' workers (numpy's BLAS), idle at the fork, which the helper never
            # waits on: it draws with matplotlib and numpy's element-wise code
            warnings.filterwarnings(
                "ignore", "This process .* is multi-threaded", DeprecationWarning
            )
            pid = os.fork()
    except BaseException:  # no helper (no memory or processes left for one): none wanted
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
        gc.unfreeze()
        for fd in (tokens, back, out):
            os.close(fd)
        raise
    if pid == 0:  # pragma: no cover - the helper; coverage does not follow it
        os.close(back)
        _in_helper(parent, tokens, out, work)
    os.close(out)
    waited = False

    def finish() -> list[T]:
        nonlocal waited
        mine = work(_claimer(tokens))
        with os.fdopen(os.dup(back), "rb") as pipe:
            data = pipe.read()
        _, status = os.waitpid(pid, 0)
        waited = True
        if not data:
            raise OutputError(
                f"the helper process {what} ended without a result "
                f"({_how_it_ended(status)}); nothing was written"
            )
        payload = pickle.loads(data)
        if payload[0] == "error":
            exc = pickle.loads(payload[1])
            raise exc from _RemoteTraceback(
                f"\n'''\n(in the helper process {what})\n{payload[2]}'''"
            )
        return [mine, payload[1]]

    try:
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)  # a signal held: raised here
        yield finish
    finally:
        if not waited:
            with contextlib.suppress(ProcessLookupError):
                os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        os.close(tokens)
        os.close(back)
        gc.unfreeze()


@contextlib.contextmanager
def beside(task: Callable[[], T], what: str) -> Iterator[Callable[[], T]]:
    """``task()`` done in a helper process forked on entry, beside the block; ``wait()``
    returns its result (its error raised here, as :func:`shared_jobs` does). Where no helper
    is forked (not Linux) it runs here in ``wait()``. Leaving the block without ``wait()``
    kills the helper."""
    here = os.getpid()

    def work(claim: Claim) -> tuple[bool, T | None]:
        if FORK and os.getpid() == here:  # the helper's alone
            return False, None
        return (True, task()) if claim() is not None else (False, None)

    with shared_jobs(1, work, what, fork_one=True) as finish:

        def wait() -> T:
            return next(value for done, value in finish() if done)  # type: ignore[return-value]

        yield wait


def _serial(jobs: int) -> Claim:
    numbers = iter(range(jobs))
    return lambda: next(numbers, None)


def _how_it_ended(status: int) -> str:
    if os.WIFSIGNALED(status):
        sig = os.WTERMSIG(status)
        return f"killed by {signal.Signals(sig).name}"
    return f"exit status {os.waitstatus_to_exitcode(status)}"
