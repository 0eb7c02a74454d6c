"""Signals during a run: SIGTERM and SIGHUP become :class:`RunTerminated` in the main
thread, so that a terminated run cleans up like one stopped with Ctrl-C (workers
terminated, temporaries removed, the checkpoint kept, the lock dropped).
"""

from __future__ import annotations

import contextlib
import signal
import threading

__all__ = ["RunTerminated", "SignalGate", "GATE", "signals_raise"]


class RunTerminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP arrived during :func:`run`.

    Raised in the main thread by the handler :func:`signals_raise` installs, so that the
    same clean-up as for Ctrl-C runs: workers terminated, temporaries removed, the
    checkpoint kept (``--resume``), the lock file removed. A KeyboardInterrupt, so the
    command line reports it as an interruption.

    Attributes
    ----------
    signum : int — the signal received
    """

    def __init__(self, signum: int):
        self.signum = int(signum)
        super().__init__(f"terminated by {signal.Signals(signum).name}")


class SignalGate:
    """What the signal handler of :func:`signals_raise` does, and where it must wait.

    A signal that arrives inside :meth:`deferred` (a worker process being started: one
    interrupted between its start and its registration in the pool would be left running,
    unknown to the pool) is held and raised when the block ends. After the first signal
    the handler does nothing more, so the clean-up it starts can finish.
    """

    def __init__(self):
        self.reset()

    def reset(self):
        self.depth, self.pending, self.fired = 0, None, False

    def handler(self, signum, frame):
        if self.fired:
            return
        if self.depth:
            self.pending = signum
            return
        self._raise(signum)

    def _raise(self, signum):
        self.fired = True
        if signum == signal.SIGINT:
            raise KeyboardInterrupt
        raise RunTerminated(signum)

    @contextlib.contextmanager
    def deferred(self):
        self.depth += 1
        try:
            yield
        finally:
            self.depth -= 1
            if not self.depth and self.pending is not None and not self.fired:
                signum, self.pending = self.pending, None
                self._raise(signum)


#: The one gate of this process (signal handlers are per process, like this state).
GATE = SignalGate()


@contextlib.contextmanager
def signals_raise():
    """Turn SIGTERM and SIGHUP into :class:`RunTerminated`, and SIGINT into
    KeyboardInterrupt, at moments where the clean-up can run, while the block runs.

    By default SIGTERM and SIGHUP end a Python process at once, without ``finally``
    blocks, and a process pool's workers would be left running; SIGINT raises
    KeyboardInterrupt anywhere, also while a worker is being started. Only in the main
    thread (signal handlers can only be set there; Python library reference, signal
    module), and only where the signal still has its default action (a SIG_IGN set by
    ``nohup`` is kept). See :class:`SignalGate`; the previous handlers are restored at
    the end.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    GATE.reset()
    previous = {}
    for name, default in (("SIGTERM", signal.SIG_DFL), ("SIGHUP", signal.SIG_DFL),
                          ("SIGINT", signal.default_int_handler)):
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) == default:
            previous[sig] = signal.signal(sig, GATE.handler)
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
        GATE.reset()
