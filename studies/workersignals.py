"""A dask worker plugin: local workers ignore SIGINT.

Ctrl-C in a terminal reaches the whole process group, local dask workers included. The client
handles it (stores what has finished, cancels the rest, releases the run lease, closes the
workers), so the workers must not die under it with a traceback each.
"""

from __future__ import annotations

import signal
import threading
from typing import Any

from distributed.diagnostics.plugin import WorkerPlugin

__all__ = ["IgnoreSigint"]


class IgnoreSigint(WorkerPlugin):
    """Set SIGINT to ignored in the worker process (from its main thread, where it runs)."""

    name = "filamant-ignore-sigint"

    def setup(self, worker: Any) -> None:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.SIG_IGN)
