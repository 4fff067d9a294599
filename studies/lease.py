"""The run lease: at most one client runs (or imports into) a study at a time.

A lease is one row of ``filamant_lease`` keyed by the study name, holding a random owner token,
the host, pid and process start time of the client, and a heartbeat refreshed every few seconds
by a background thread (and by every result transaction, see :meth:`Store.write_batch`).

Taking a lease is atomic on any SQL database: an ``INSERT`` that the primary key lets only one
client win. A lease that is already there can be taken over only if it is *stale* — its
heartbeat is older than ``stale_after_s``, or its process is gone from this very host (pid not
running, a zombie, or a pid reused by a process that started at another time) — and then only
by a compare-and-swap ``UPDATE ... WHERE owner = <old owner> AND heartbeat_at = <old
heartbeat>``, which exactly one contender can win. So a client killed with SIGKILL never blocks
the next run for longer than ``stale_after_s`` (not at all on the same host), and two live
clients never both hold it.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time
import uuid
from dataclasses import dataclass
from typing import Any

from sqlalchemy import delete, insert, select, update
from sqlalchemy.exc import IntegrityError, SQLAlchemyError

from studies.store import Store, lease_table
from sweeps.errors import StoreError

__all__ = ["Lease", "LeaseInfo", "lease_info", "process_start", "pid_alive"]

logger = logging.getLogger(__name__)

#: Default heartbeat period and staleness limit in s.
HEARTBEAT_S = 5.0
STALE_AFTER_S = 60.0


def _stat(pid: int) -> list[str]:
    """Fields 3... of ``/proc/<pid>/stat`` (after the command name), or ``[]``."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            stat = fh.read()
    except OSError:
        return []
    # the command name (field 2) may contain spaces and parentheses: split after the last ")"
    return stat[stat.rfind(")") + 2:].split()


def process_start(pid: int) -> str:
    """Start time of process ``pid`` in clock ticks since boot (Linux ``/proc``), or ``""``."""
    fields = _stat(pid)
    return fields[19] if len(fields) > 19 else ""


def pid_alive(pid: int, proc_start: str = "") -> bool:
    """Whether process ``pid`` on this host is running and is the process that took the lease."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass
    if (_stat(pid) or [""])[0] in ("Z", "X"):  # a zombie or dead process
        return False
    return not (proc_start and process_start(pid) and process_start(pid) != proc_start)


@dataclass(frozen=True)
class LeaseInfo:
    """Who holds a study's lease (for ``status`` and messages)."""

    owner: str
    host: str
    pid: int
    command: str
    started_at: float
    heartbeat_at: float
    heartbeat_age_s: float
    stale: bool
    why_stale: str

    def as_dict(self) -> dict[str, Any]:
        return {"host": self.host, "pid": self.pid, "command": self.command,
                "started_at": self.started_at, "heartbeat_age_s": round(self.heartbeat_age_s, 1),
                "stale": self.stale}

    def describe(self) -> str:
        return (f"`{self.command}` by pid {self.pid} on {self.host}, heartbeat "
                f"{self.heartbeat_age_s:.0f} s ago")


def _info(row: Any, stale_after_s: float) -> LeaseInfo:
    age = time.time() - row.heartbeat_at
    why = ""
    if age > stale_after_s:
        why = f"its heartbeat is {age:.0f} s old (limit {stale_after_s:g} s)"
    elif row.host == socket.gethostname() and not pid_alive(row.pid, row.proc_start):
        why = f"its process {row.pid} is no longer running on this host"
    return LeaseInfo(owner=row.owner, host=row.host, pid=row.pid, command=row.command,
                     started_at=row.started_at, heartbeat_at=row.heartbeat_at,
                     heartbeat_age_s=age, stale=bool(why), why_stale=why)


def lease_info(store: Store, study: str, stale_after_s: float = STALE_AFTER_S) -> LeaseInfo | None:
    """The current lease of ``study`` or ``None``."""
    with store.read() as conn:
        row = conn.execute(select(lease_table).where(lease_table.c.study == study)).first()
    return None if row is None else _info(row, stale_after_s)


class Lease:
    """A held lease; use :meth:`acquire`, then :meth:`release` (or ``with``).

    Attributes
    ----------
    owner : str
        Random token identifying this holder in the store.
    lost : threading.Event
        Set by the heartbeat thread if the lease row is gone or owned by someone else.
    """

    def __init__(self, store: Store, study: str, owner: str, *, heartbeat_s: float,
                 stale_after_s: float) -> None:
        self.store = store
        self.study = study
        self.owner = owner
        self.heartbeat_s = heartbeat_s
        self.stale_after_s = stale_after_s
        self.lost = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    @classmethod
    def acquire(cls, store: Store, study: str, *, command: str = "run",
                heartbeat_s: float = HEARTBEAT_S, stale_after_s: float = STALE_AFTER_S) -> Lease:
        """Take the lease of ``study`` or raise :class:`StoreError` saying who holds it.

        Parameters
        ----------
        store : Store
        study : str
        command : str
            What the holder does (shown to others): ``"run"``, ``"import"``.
        heartbeat_s : float
            Heartbeat period in s.
        stale_after_s : float
            A lease whose heartbeat is older than this (s) may be taken over.
        """
        me = dict(owner=uuid.uuid4().hex, host=socket.gethostname(), pid=os.getpid(),
                  proc_start=process_start(os.getpid()), command=command)
        lease = cls(store, study, me["owner"], heartbeat_s=heartbeat_s,
                    stale_after_s=stale_after_s)
        for _ in range(5):
            now = time.time()
            try:
                with store.write() as conn:
                    conn.execute(insert(lease_table).values(study=study, started_at=now,
                                                            heartbeat_at=now, **me))
                logger.debug("lease of %r taken by %s", study, me["owner"])
                return lease
            except IntegrityError:
                pass
            info = lease_info(store, study, stale_after_s)
            if info is None:
                continue  # released in between: try the insert again
            if not info.stale:
                raise StoreError(
                    f"{store.display_url}: study {study!r} is being run right now "
                    f"({info.describe()}); refusing to start a second {command}. Wait for it "
                    f"to finish or stop it (a lease is taken over once its heartbeat is older "
                    f"than {stale_after_s:g} s)"
                )
            with store.write() as conn:
                won = conn.execute(
                    update(lease_table)
                    .where(lease_table.c.study == study, lease_table.c.owner == info.owner,
                           lease_table.c.heartbeat_at == info.heartbeat_at)
                    .values(started_at=now, heartbeat_at=now, **me)).rowcount == 1
            if won:
                logger.warning("took over the stale lease of study %r (%s): %s", study,
                               info.describe(), info.why_stale)
                return lease
        raise StoreError(f"{store.display_url}: study {study!r}: could not take the run lease "
                         "(other clients keep competing for it); try again")

    # -- heartbeat ----------------------------------------------------------------------------

    def beat(self) -> bool:
        """Refresh the heartbeat now; ``False`` (and :attr:`lost` set) if the lease is gone."""
        with self.store.write() as conn:
            n = conn.execute(update(lease_table)
                             .where(lease_table.c.study == self.study,
                                    lease_table.c.owner == self.owner)
                             .values(heartbeat_at=time.time())).rowcount
        if n != 1:
            self.lost.set()
        return n == 1

    def _loop(self) -> None:
        while not self._stop.wait(self.heartbeat_s):
            try:
                if not self.beat():
                    logger.error("the lease of study %r was taken over by another client",
                                 self.study)
                    return
            except SQLAlchemyError as exc:  # a busy or briefly unreachable database
                logger.warning("lease heartbeat failed (will retry): %s", exc)

    def start_heartbeat(self) -> None:
        """Refresh the heartbeat from a daemon thread every ``heartbeat_s`` seconds."""
        if self._thread is None:
            self._thread = threading.Thread(target=self._loop, name="filamant-lease",
                                            daemon=True)
            self._thread.start()

    def stop_heartbeat(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=10.0)
            self._thread = None

    def release(self) -> None:
        """Stop the heartbeat and delete the lease row (if still ours)."""
        self.stop_heartbeat()
        try:
            with self.store.write() as conn:
                conn.execute(delete(lease_table).where(lease_table.c.study == self.study,
                                                       lease_table.c.owner == self.owner))
        except SQLAlchemyError as exc:
            logger.warning("could not release the lease of study %r: %s (it goes stale in "
                           "%g s)", self.study, exc, self.stale_after_s)

    def __enter__(self) -> Lease:
        self.start_heartbeat()
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()
