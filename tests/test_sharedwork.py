"""Jobs shared with a forked helper process (yieldscape.sharedwork): each job done once, the
helper's errors raised in the caller, and no helper left once the block is left."""

import errno
import os
import signal
import threading
import time

import pytest

from yieldscape import sharedwork
from yieldscape.errors import OutputError
from yieldscape.sharedwork import FORK, beside, shared_jobs

pytestmark = pytest.mark.skipif(not FORK, reason="the helper is forked on Linux only")


def test_each_job_is_done_once_by_one_of_the_two_processes():
    def work(claim):
        done = []
        while (i := claim()) is not None:
            time.sleep(0.02)
            done.append((i, os.getpid()))
        return done

    with shared_jobs(30, work, "testing") as finish:
        time.sleep(0.2)  # this process's own work; the helper takes jobs meanwhile
        mine, helpers = finish()
    jobs = [i for i, _ in mine + helpers]
    assert sorted(jobs) == list(range(30))  # every job, none twice
    assert {pid for _, pid in mine} == {os.getpid()}
    assert helpers and os.getpid() not in {pid for _, pid in helpers}
    assert [i for i, _ in helpers] == sorted(i for i, _ in helpers)  # taken in order


def test_an_error_in_the_helper_is_raised_here_with_its_traceback():
    here = os.getpid()

    def work(claim):
        if os.getpid() != here:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), "/x/figures/age.png")
        while claim() is not None:
            pass
        return []

    with pytest.raises(OSError) as info, shared_jobs(3, work, "testing") as finish:
        finish()
    assert info.value.errno == errno.ENOSPC  # what the run turns into "no space left"
    assert info.value.filename == "/x/figures/age.png"
    assert "in the helper process testing" in str(info.value.__cause__)
    assert "raise OSError" in str(info.value.__cause__)


def test_a_helper_killed_from_outside_is_an_error_that_says_so(tmp_path):
    here = os.getpid()

    def work(claim):
        if os.getpid() != here:
            os.kill(os.getpid(), signal.SIGKILL)
        return []

    with (
        pytest.raises(
            OutputError,
            match="helper process testing ended without a result "
            r"\(killed by SIGKILL\)",
        ),
        shared_jobs(2, work, "testing") as finish,
    ):
        finish()


@pytest.mark.parametrize("leave", [KeyboardInterrupt, ValueError])
def test_leaving_the_block_early_kills_the_helper_before_it_writes(tmp_path, leave):
    here = os.getpid()
    started, late = tmp_path / "started", tmp_path / "late"

    def work(claim):
        if os.getpid() != here:
            started.write_text(str(os.getpid()))
            time.sleep(1.0)
            late.write_text("written after the block was left")
        return []

    with pytest.raises(leave), shared_jobs(2, work, "testing"):
        while not started.exists() or not started.read_text():
            time.sleep(0.01)
        raise leave()
    pid = int(started.read_text())
    with pytest.raises(ProcessLookupError):  # ended and reaped, not a zombie
        os.kill(pid, 0)
    time.sleep(1.2)
    assert not late.exists()


def test_without_a_helper_every_job_runs_here():
    def work(claim):
        return [i for i in iter(claim, None)]

    with shared_jobs(1, work, "testing") as finish:
        assert finish() == [[0]]
    with shared_jobs(0, work, "testing") as finish:
        assert finish() == [[]]


class _Unpicklable(Exception):
    def __init__(self, a, b):
        super().__init__(a)
        # pickled with its attributes by the default reduction and by tblib's (which
        # dask.distributed installs for every exception class when imported: a class that
        # only failed to unpickle then depended on the order of the suite); a lock does not
        self.lock = threading.Lock()


def test_an_error_that_does_not_unpickle_comes_back_as_its_text():
    here = os.getpid()

    def work(claim):
        if os.getpid() != here:
            raise _Unpicklable("no figure", 2)
        return []

    with (
        pytest.raises(RuntimeError, match="_Unpicklable: no figure"),
        shared_jobs(2, work, "testing") as finish,
    ):
        finish()


_SIGNAL_AT_FORK = []  # set: the next fork raises SIGTERM in the parent's after-fork hooks


def _signal_at_fork():
    if _SIGNAL_AT_FORK:
        _SIGNAL_AT_FORK.clear()
        signal.raise_signal(signal.SIGTERM)


os.register_at_fork(after_in_parent=_signal_at_fork)  # a hook for good: inert unless set


def test_a_signal_during_the_fork_ends_the_block_and_the_helper(tmp_path):
    # a handler's exception inside the fork's after-fork hooks (where logging's run) is
    # printed and dropped by Python; held over the fork, the signal arrives after it and
    # leaves the block as any signal does, the helper killed and reaped
    class Stop(Exception):
        pass

    def on_term(signum, frame):
        raise Stop

    started = tmp_path / "started"

    def work(claim):
        if not started.exists():
            started.write_text(str(os.getpid()))
        return [i for i in iter(claim, None)]

    previous = signal.signal(signal.SIGTERM, on_term)
    try:
        _SIGNAL_AT_FORK.append(True)
        with pytest.raises(Stop), shared_jobs(2, work, "testing") as finish:
            finish()  # not reached: the signal ends the block first
            pytest.fail("the signal was lost")
    finally:
        _SIGNAL_AT_FORK.clear()
        signal.signal(signal.SIGTERM, previous)
    assert signal.pthread_sigmask(signal.SIG_BLOCK, []) & {signal.SIGTERM, signal.SIGINT} == set()


def test_a_task_beside_the_block_runs_in_the_helper_while_the_block_runs(tmp_path):
    here, began = os.getpid(), tmp_path / "began"

    def task():
        began.write_text("")
        return os.getpid()

    with beside(task, "testing") as wait:
        while not began.exists():  # the block goes on while the helper works
            time.sleep(0.01)
        pid = wait()
    assert pid != here
    with pytest.raises(ProcessLookupError):  # waited for and reaped
        os.kill(pid, 0)


def test_a_task_beside_the_block_raises_its_error_where_it_is_waited_for():
    def task():
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), "/x/projection.gpkg")

    with pytest.raises(OSError) as info, beside(task, "writing stands") as wait:
        wait()  # at once: the helper's task all the same
    assert info.value.filename == "/x/projection.gpkg"
    assert "in the helper process writing stands" in str(info.value.__cause__)


def test_a_task_beside_the_block_left_unwaited_is_killed_before_it_writes(tmp_path):
    started, late = tmp_path / "started", tmp_path / "late"

    def task():
        started.write_text(str(os.getpid()))
        time.sleep(1.0)
        late.write_text("written after the block was left")

    with pytest.raises(KeyboardInterrupt), beside(task, "testing"):
        while not started.exists() or not started.read_text():
            time.sleep(0.01)
        raise KeyboardInterrupt
    with pytest.raises(ProcessLookupError):
        os.kill(int(started.read_text()), 0)
    time.sleep(1.2)
    assert not late.exists()


def test_without_a_fork_the_task_runs_here_when_waited_for(monkeypatch):
    monkeypatch.setattr(sharedwork, "FORK", False)
    done = []
    with beside(lambda: done.append(os.getpid()) or "value", "testing") as wait:
        assert done == []  # not before it is waited for
        assert wait() == "value"
    assert done == [os.getpid()]
