"""A dask worker plugin for the workers of a local cluster (the client's own processes).

- They ignore SIGINT. Ctrl-C in a terminal reaches the whole process group, local dask workers
  included. The client handles it (stores what has finished, cancels the rest, releases the run
  lease, closes the workers), so the workers must not die under it with a traceback each.
- They do not log a traceback when the scheduler closes while a worker heartbeat is on its way.
  The client owns that scheduler and closes it at the end of every run; a heartbeat caught in
  flight is the ordinary shutdown race of dask's ``LocalCluster``, not a fault, and its
  traceback on the terminal after a clean Ctrl-C would only alarm the user.
"""

from __future__ import annotations

import logging
import signal
import threading
from typing import Any

from distributed.diagnostics.plugin import WorkerPlugin

__all__ = ["LocalWorkerPlugin"]

#: The message ``distributed.worker`` logs (with a traceback) for a heartbeat that met a closed
#: scheduler.
_HEARTBEAT_LOST = "Failed to communicate with scheduler during heartbeat"


class _DropHeartbeatLost(logging.Filter):
    def filter(self, record: logging.LogRecord) -> bool:
        return not str(record.msg).startswith(_HEARTBEAT_LOST)


class LocalWorkerPlugin(WorkerPlugin):
    """Ignore SIGINT and the shutdown heartbeat race in a local worker process."""

    name = "filamant-local-worker"

    def setup(self, worker: Any) -> None:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.SIG_IGN)
        log = logging.getLogger("distributed.worker")
        if not any(isinstance(f, _DropHeartbeatLost) for f in log.filters):
            log.addFilter(_DropHeartbeatLost())
