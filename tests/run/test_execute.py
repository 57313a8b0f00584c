"""The stop request and the in-process executor of a run's one execution loop.

Source of truth: the signal numbers of Python's `signal` module (POSIX); the end-to-end
interrupt test (tests/run/test_runner.py) sends SIGTERM to a real run, and this module shows
that SIGINT and SIGHUP reach the very same handler."""
import signal

import pytest

from spikemeasure.run import STOP_SIGNALS, RunStopped
from spikemeasure.run.execute import InProcessExecutor, StopRequest

NAMES = ("SIGINT", "SIGTERM", "SIGHUP")


def test_ctrl_c_terminate_and_hang_up_share_one_handler():
    before = {s: signal.getsignal(s) for s in STOP_SIGNALS}
    assert {signal.Signals(s).name for s in STOP_SIGNALS} == set(NAMES)
    with StopRequest() as stop:
        handlers = {signal.getsignal(s) for s in STOP_SIGNALS}
        assert handlers == {stop.handle}
    assert {s: signal.getsignal(s) for s in STOP_SIGNALS} == before  # restored


@pytest.mark.parametrize("name", NAMES)
def test_each_stop_signal_stops_at_the_next_check_and_a_second_at_once(name):
    signum = getattr(signal, name)
    with StopRequest() as stop:
        stop.check()  # nothing asked yet
        signal.raise_signal(signum)
        assert stop.requested and stop.signum == signum
        with pytest.raises(RunStopped) as info:
            stop.check()
        assert info.value.signum == signum
        with pytest.raises(RunStopped):
            signal.raise_signal(signum)  # a second one raises in the handler itself
    assert isinstance(info.value, KeyboardInterrupt)


def test_in_process_executor_runs_at_submit_and_lets_a_stop_through():
    executor = InProcessExecutor()
    calls = []
    done = executor.submit(lambda x: calls.append(x) or x * 2, 21)
    assert calls == [21] and done.done() and done.result() == 42
    failed = executor.submit(lambda: 1 / 0)
    assert isinstance(failed.exception(), ZeroDivisionError)

    def stopped():
        raise RunStopped(signal.SIGTERM)

    with pytest.raises(RunStopped):
        executor.submit(stopped)
