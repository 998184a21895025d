"""Ctrl-C and SIGTERM while a command runs: recorded, raised as ``Interrupted``, or held while an output
folder is swapped into place, so that the message about an interrupt can say truly what changed."""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

HELD = (signal.SIGINT, signal.SIGTERM)


class Interrupted(KeyboardInterrupt):
    """Ctrl-C or SIGTERM; a KeyboardInterrupt, so code that stops on Ctrl-C stops on both."""

    def __init__(self, signum: int) -> None:
        super().__init__(signal.Signals(signum).name)
        self.signum = signum


@dataclass
class SignalState:
    received: int | None = None
    holding: bool = False
    published: list[Path] = field(default_factory=list)


_STATE = SignalState()  # replaced for the length of each handling_signals() block


def _on_signal(signum: int, frame: object) -> None:
    # Recorded first: the sampler catches the exception raised here and returns padded draws, so the
    # run looks at the record after each fit (raise_if_interrupted) rather than trusting the exception.
    _STATE.received = _STATE.received or signum
    if not _STATE.holding:
        raise Interrupted(signum)


@contextmanager
def handling_signals() -> Iterator[SignalState]:
    """Ctrl-C and SIGTERM raise ``Interrupted`` (and are recorded) until the block ends; the state says
    afterwards which folders were published, so the message about an interrupt can be true."""
    global _STATE
    state, outer = SignalState(), _STATE
    _STATE = state
    installed = threading.current_thread() is threading.main_thread()  # signal.signal() works only there
    previous = {signum: signal.signal(signum, _on_signal) for signum in HELD} if installed else {}
    try:
        yield state
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler if handler is not None else signal.SIG_DFL)
        _STATE = outer


def raise_if_interrupted() -> None:
    if _STATE.received is not None:
        raise Interrupted(_STATE.received)


@contextmanager
def signals_held() -> Iterator[None]:
    """Ctrl-C and SIGTERM wait until the block ends. The mask stops delivery to this thread; the flag
    covers a signal whose Python handler was already due when the mask went up."""
    _STATE.holding = True
    mask = signal.pthread_sigmask(signal.SIG_BLOCK, HELD)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
        _STATE.holding = False
    raise_if_interrupted()


def mark_published(folder: Path) -> None:
    """Note that ``folder`` now holds the new outputs (an interrupt after this point changed something)."""
    _STATE.published.append(folder)
