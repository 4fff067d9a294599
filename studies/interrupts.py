"""Ctrl-C and SIGTERM for a client loop, raised only where nothing is half-written.

A ``KeyboardInterrupt`` raised inside a database transaction can leave a pooled SQLite
connection holding the write lock; the lease release, the requeueing of unfinished work and the
next run then wait for that lock in vain (the busy timeout is 30 s). So a client loop installs
:class:`SafeInterrupts`: while the loop waits for an evaluation the signal raises
``KeyboardInterrupt`` at once; anywhere else (a store or optuna transaction, a sampler step) it
only sets a flag, which the loop turns into ``KeyboardInterrupt`` at its next safe point
(:meth:`SafeInterrupts.check`).

Every write transaction of the store (:meth:`studies.store.Store.write`) also holds the two
signals back until it has committed or rolled back (:func:`held_signals`), so an import, a
refinement, the lease itself or any later caller cannot be caught half-way either.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

__all__ = ["SafeInterrupts", "held_signals"]

_SIGNALS = (signal.SIGINT, signal.SIGTERM)


class SafeInterrupts:
    """SIGINT and SIGTERM held back to the safe points of one client loop."""

    def __init__(self) -> None:
        self.requested = False
        self._waiting = False

    def _handler(self, signum: int, frame: Any) -> None:
        self.requested = True
        if self._waiting:
            raise KeyboardInterrupt

    def check(self) -> None:
        """A safe point: raise the interrupt asked for since the handlers were installed."""
        if self.requested:
            raise KeyboardInterrupt

    @contextmanager
    def waiting(self) -> Iterator[None]:
        """A block that may be interrupted at once (a wait for the cluster, nothing written)."""
        self.check()
        self._waiting = True
        try:
            yield
        finally:
            self._waiting = False

    @contextmanager
    def deferred(self) -> Iterator[None]:
        """Install the handlers for SIGINT and SIGTERM (main thread only; elsewhere a no-op)."""
        if threading.current_thread() is not threading.main_thread():
            yield
            return
        old = {sig: signal.signal(sig, self._handler) for sig in (signal.SIGINT, signal.SIGTERM)}
        try:
            yield
        finally:
            for sig, handler in old.items():
                signal.signal(sig, handler)


@contextmanager
def held_signals() -> Iterator[None]:
    """Hold SIGINT and SIGTERM back for the block, then deliver them to the handlers before it.

    Main thread only (Python runs signal handlers there; elsewhere a no-op). A signal that came
    during the block is raised again with :func:`signal.raise_signal` once the block is over
    and the previous handlers are back: ``KeyboardInterrupt`` right after the block, a
    :class:`SafeInterrupts` flag, or the default action of SIGTERM.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = {sig: signal.getsignal(sig) for sig in _SIGNALS}
    if any(h is None for h in old.values()):  # a handler not set from Python: leave it be
        yield
        return
    got: list[int] = []

    def hold(signum: int, frame: Any) -> None:
        got.append(signum)

    for sig in _SIGNALS:
        signal.signal(sig, hold)
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
        for sig in dict.fromkeys(got):
            signal.raise_signal(sig)
