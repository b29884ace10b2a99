"""Every terminating signal stops a bench command the way Ctrl-C does.

SIGINT (Ctrl-C), SIGTERM (``kill``, ``timeout``, a CI cancel) and SIGHUP (a lost terminal or ssh
session) raise :class:`labtool.errors.Terminated` in the main thread, so the same ``finally`` blocks
switch outputs off and close the journal whatever stopped the run. While outputs are being switched
off (:func:`shielded`) a signal waits: the off sequence is never cut short, and a second signal
during the shutdown only says that labtool is already stopping.
"""

from __future__ import annotations

import signal
import sys
import threading
from contextlib import contextmanager
from typing import Iterator

from labtool.errors import Terminated

STOP_SIGNALS = tuple(s for s in (getattr(signal, n, None) for n in ("SIGINT", "SIGTERM", "SIGHUP")) if s)


class _State:
    depth = 0  # nesting of shielded()
    pending: int | None = None  # a signal that came while shielded
    stopping: int | None = None  # the signal that stopped the command


_state = _State()


class Shield:
    """Handle of a shielded block: ``signal`` is a signal that came meanwhile; with ``raise_pending``
    False it is not raised at the end (a graver error is about to be)."""

    def __init__(self):
        self.raise_pending = True

    @property
    def signal(self) -> int | None:
        return _state.pending or _state.stopping


def _say(text: str) -> None:
    try:
        print(f"labtool: {text}", file=sys.stderr, flush=True)
    except (OSError, ValueError):
        pass  # the terminal is gone (SIGHUP): say nothing, go on switching off


def _terminated(signum: int) -> Terminated:
    return Terminated(signum, signal.Signals(signum).name)


def _handler(signum, frame) -> None:
    if _state.stopping is not None or _state.pending is not None:
        _say(f"{signal.Signals(signum).name}: already stopping, switching outputs off first")
        return
    if _state.depth:
        _state.pending = signum
        _say(f"{signal.Signals(signum).name}: stopping as soon as the outputs are off")
        return
    _state.stopping = signum
    raise _terminated(signum)


@contextmanager
def stop_on_signals() -> Iterator[None]:
    """Install the handlers for the block (main thread only; elsewhere the block runs unchanged)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    _state.depth, _state.pending, _state.stopping = 0, None, None
    previous = {sig: signal.signal(sig, _handler) for sig in STOP_SIGNALS}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


@contextmanager
def shielded() -> Iterator[Shield]:
    """Signals wait until the block ends; then one that came is raised (unless the block itself
    raised, or cleared ``raise_pending``)."""
    shield = Shield()
    _state.depth += 1
    try:
        yield shield
    finally:
        _state.depth -= 1
    if _state.depth == 0 and _state.pending is not None:
        signum, _state.pending = _state.pending, None
        _state.stopping = signum
        if shield.raise_pending:
            raise _terminated(signum)
