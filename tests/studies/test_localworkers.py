"""The local-worker plugin, the interrupt gate of the client loops and the signals held during
store writes (studies.localworkers, studies.interrupts)."""

from __future__ import annotations

import inspect
import logging
import os
import signal
import threading

import distributed.worker
import pytest

from studies.interrupts import SafeInterrupts
from studies.localworkers import _HEARTBEAT_LOST, LocalWorkerPlugin, _DropHeartbeatLost


def test_the_dropped_message_is_the_one_dask_logs():
    # the filter matches by text: a dask release that rewords the message must fail here
    assert f'"{_HEARTBEAT_LOST}.' in inspect.getsource(distributed.worker.Worker.heartbeat)


def test_plugin_drops_only_the_shutdown_heartbeat_traceback():
    log = logging.getLogger("distributed.worker")
    before = list(log.filters)
    try:
        # off the main thread the plugin leaves SIGINT alone (this is the test process)
        t = threading.Thread(target=LocalWorkerPlugin().setup, args=(None,))
        t.start()
        t.join()
        t = threading.Thread(target=LocalWorkerPlugin().setup, args=(None,))
        t.start()
        t.join()
        added = [f for f in log.filters if f not in before]
        assert len(added) == 1 and isinstance(added[0], _DropHeartbeatLost)  # once only

        def record(msg: str) -> logging.LogRecord:
            return logging.LogRecord("distributed.worker", logging.ERROR, __file__, 1, msg,
                                     None, None)

        assert not log.filter(record(_HEARTBEAT_LOST + "."))
        assert log.filter(record("Unexpected exception during heartbeat. Closing worker."))
        assert log.filter(record("Worker is at 95% memory usage."))
    finally:
        log.filters[:] = before


def test_interrupt_outside_waiting_is_held_to_the_next_safe_point():
    before = signal.getsignal(signal.SIGINT)
    gate = SafeInterrupts()
    with gate.deferred():
        os.kill(os.getpid(), signal.SIGINT)  # delivered while "writing": only noted
        assert gate.requested
        with pytest.raises(KeyboardInterrupt):
            gate.check()
    assert signal.getsignal(signal.SIGINT) is before  # restored, whatever it was


def test_interrupt_while_waiting_raises_at_once():
    gate = SafeInterrupts()
    with gate.deferred(), pytest.raises(KeyboardInterrupt):
        with gate.waiting():
            os.kill(os.getpid(), signal.SIGTERM)  # SIGTERM stops a run like Ctrl-C
            threading.Event().wait(5.0)  # interrupted, never times out
            pytest.fail("the wait was not interrupted")


@pytest.fixture
def terminal_sigint():
    """Python's own Ctrl-C handler for the test, as in a terminal: a shell that starts the
    tests in the background passes SIGINT down ignored."""
    old = signal.signal(signal.SIGINT, signal.default_int_handler)
    yield
    signal.signal(signal.SIGINT, old)


def test_ctrl_c_inside_a_store_write_comes_after_the_commit(tmp_path, terminal_sigint):
    """The CI failure this guards against: an interrupt inside an SQLite write left the pooled
    connection holding the lock, and the lease release then waited out the busy timeout."""
    import socket
    import sqlite3
    import time

    from studies.lease import lease_info
    from studies.store import Store, lease_table

    db = tmp_path / "s.db"
    store = Store(f"sqlite:///{db}")
    now = time.time()
    with pytest.raises(KeyboardInterrupt):
        with store.write() as conn:
            os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C in the middle of the transaction
            conn.execute(lease_table.insert().values(
                study="s", owner="me", host=socket.gethostname(), pid=os.getpid(),
                proc_start="0", command="run", started_at=now, heartbeat_at=now))
        pytest.fail("the held Ctrl-C was not delivered after the block")
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    assert lease_info(store, "s").owner == "me"  # committed before the interrupt
    # and no lock is left behind: another connection takes the write lock at once
    other = sqlite3.connect(db, timeout=0.5, isolation_level=None)
    other.execute("BEGIN IMMEDIATE")
    other.execute("ROLLBACK")
    other.close()
    store.close()
