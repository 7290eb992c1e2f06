"""Helper processes (``fieldsection/forked.py``): a speed-up that is never a condition of the run."""

import multiprocessing
import os

import pytest

from fieldsection.forked import HelperCall, helper_call, helpers_available

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="helpers are forked; this platform cannot fork")


def _pid_and_sum(values):
    return os.getpid(), sum(values)


def _fails():
    raise RuntimeError("a helper's failure")


def _dies():
    os._exit(3)


def test_a_helper_returns_its_value_from_another_process():
    pid, total = HelperCall(_pid_and_sum, [1, 2, 3]).result()
    assert total == 6 and pid != os.getpid()


def test_a_failing_or_dying_helper_gives_none_and_is_reaped():
    for work in (_fails, _dies):
        call = HelperCall(work)
        child = call._pid
        assert call.result() is None
        with pytest.raises(ChildProcessError):  # reaped: no zombie left behind
            os.waitpid(child, os.WNOHANG)


def test_no_helper_inside_a_pool_worker():
    # a pool or cluster worker's cores are taken by the other workers: no helper there
    with multiprocessing.get_context("fork").Pool(1) as pool:
        assert pool.apply(helpers_available) is False
        assert pool.apply(_helper_or_none) is None


def _helper_or_none():
    return helper_call(_pid_and_sum, [1])


def test_a_refused_fork_means_no_helper(monkeypatch):
    # a system out of processes (or one that forbids fork) refuses with OSError: no helper, and no error
    def refused():
        raise BlockingIOError(11, "Resource temporarily unavailable")

    monkeypatch.setattr(os, "fork", refused)
    if helpers_available():
        assert helper_call(_pid_and_sum, [1]) is None
