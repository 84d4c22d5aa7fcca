"""Stopping a run on SIGINT (Ctrl-C) or SIGTERM (``kill``, a batch system's time limit) the same way.

- :func:`stop_requests` is what the fit loop runs under: a first SIGINT or
  SIGTERM is only recorded, the loop finishes its step, writes its checkpoint
  (when checkpoints are on) and raises :class:`Interrupted`; a second signal
  raises at once.
- :func:`terminate_as_interrupt` is for a command-line program: from then on
  SIGTERM raises :class:`Interrupted` wherever the program is, as SIGINT raises
  :class:`KeyboardInterrupt`, so one ``except KeyboardInterrupt`` prints one line
  and exits with :func:`exit_status` (130 for SIGINT, 143 for SIGTERM: 128 plus
  the signal number, the shells' convention).

Signal handlers can only be set from the main thread; elsewhere both functions
leave the handlers alone (signals then act as Python's defaults).
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager
from pathlib import Path

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


class Interrupted(KeyboardInterrupt):
    """A run stopped by a signal.

    Attributes
    ----------
    signum : the signal number (SIGINT 2, SIGTERM 15)
    exit_status : 128 + signum, the status a command-line program exits with
    step : training steps completed when the run stopped (None outside the fit loop)
    checkpoint : the checkpoint written at that step, or None
    """

    def __init__(self, signum: int, step: int | None = None, checkpoint: Path | None = None):
        self.signum = int(signum)
        self.exit_status = 128 + self.signum
        self.step = step
        self.checkpoint = checkpoint
        name = signal.Signals(self.signum).name
        where = "" if step is None else f" after step {step}"
        saved = "" if checkpoint is None else f"; checkpoint written to {checkpoint} (resume with it)"
        super().__init__(f"stopped by {name}{where}{saved}")

    def __str__(self) -> str:
        return self.args[0]


def exit_status(exc: BaseException) -> int:
    """The exit status for a run stopped by ``exc``: 128 + signal number, 130 for a plain KeyboardInterrupt."""
    return getattr(exc, "exit_status", 128 + int(signal.SIGINT))


class StopRequest:
    """What :func:`stop_requests` yields: ``signum`` of the first signal received, or None."""

    def __init__(self):
        self.signum: int | None = None

    @property
    def requested(self) -> bool:
        return self.signum is not None


def _in_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


@contextmanager
def stop_requests():
    """Within the block, the first SIGINT or SIGTERM is recorded in the yielded :class:`StopRequest`
    (the caller stops at a safe point); a second one raises :class:`Interrupted` at once. The previous
    handlers are restored on exit."""
    request = StopRequest()
    if not _in_main_thread():
        yield request
        return

    def record(signum, frame):
        if request.signum is not None:
            raise Interrupted(signum)
        request.signum = signum

    previous = {s: signal.getsignal(s) for s in STOP_SIGNALS}
    for s in STOP_SIGNALS:
        signal.signal(s, record)
    try:
        yield request
    finally:
        for s, handler in previous.items():
            signal.signal(s, signal.SIG_DFL if handler is None else handler)


def _raise_interrupted(signum, frame):
    raise Interrupted(signum)


def terminate_as_interrupt() -> None:
    """Make SIGTERM raise :class:`Interrupted` (a KeyboardInterrupt) in the main thread, as SIGINT does."""
    if _in_main_thread():
        signal.signal(signal.SIGTERM, _raise_interrupted)
