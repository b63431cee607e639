"""A Ctrl-C that Python swallows (raised while an object is finalised) still stops the job."""

import gc
import os
import signal

import pytest

from halo.core import interrupt


# the swallowed exception is the point of the test: pytest reports it as unraisable
@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")
def test_interrupt_swallowed_in_a_finaliser_is_not_lost():
    class Finalised:
        def __del__(self):
            # the handler's KeyboardInterrupt is raised here, where Python only prints
            # "Exception ignored in ..." and goes on (common practice of CPython finalisers)
            os.kill(os.getpid(), signal.SIGINT)

    previous = signal.getsignal(signal.SIGINT)
    try:
        interrupt.arm()
        assert not interrupt.interrupted()
        Finalised()
        gc.collect()
        assert interrupt.interrupted()
        with pytest.raises(KeyboardInterrupt):
            interrupt.check()
        interrupt.arm()  # a new command starts clean
        interrupt.check()
    finally:
        signal.signal(signal.SIGINT, previous)
