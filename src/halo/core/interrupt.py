"""Ctrl-C that cannot be lost: the command line arms a SIGINT handler that both raises
KeyboardInterrupt (the usual way) and remembers the interrupt, and long jobs call
:func:`check` between their steps. Python drops an exception raised while an object is being
finalised ("Exception ignored in ... __del__"), so a SIGINT that lands there would otherwise let
the job run on and finish as if nothing happened."""

import signal
import threading

__all__ = ["arm", "check", "interrupted"]

_EVENT = threading.Event()


def _handler(signum, frame):
    _EVENT.set()
    raise KeyboardInterrupt


def arm():
    """Install the handler (main thread only; a no-op elsewhere) and clear earlier interrupts."""
    _EVENT.clear()
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, _handler)


def interrupted():
    """True once SIGINT arrived after :func:`arm`."""
    return _EVENT.is_set()


def check():
    """Raise KeyboardInterrupt if SIGINT arrived (even if its first exception was swallowed)."""
    if _EVENT.is_set():
        raise KeyboardInterrupt
