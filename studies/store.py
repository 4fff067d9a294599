"""The study store: one relational database per study (SQLite by default, any SQLAlchemy URL).

Tables (all prefixed ``filamant_`` so that optuna's tables can share the database):

``filamant_study``
    One row per study: name, config snapshot (canonical JSON), plan fingerprint, solver
    settings fingerprint, solver version, creation time.
``filamant_points``
    The plan, stored up front: ``(study, point_id)``, plan position ``seq``, parameters (JSON, in
    config units), ``status`` (planned | done | failed), failure ``reason``, ``attempts``,
    ``source`` (solver | touchstone | optimize), timestamps.
``filamant_results``
    One nullable float column per metric (``sweeps.metrics`` names), the reasons of the null
    ones (JSON), solve time and worker.
``filamant_responses``
    ``f_hz`` (F,), ``z`` (F, P, P) complex and ``z0_ohm`` (P,) as numpy ``.npy`` bytes, so a
    Touchstone export never re-solves.
``filamant_lease``
    Who is running the study right now (see :mod:`studies.lease`).

Every change is one transaction, and every transaction that writes results first re-checks that
the caller still holds the study's lease (a fencing check), so a client whose lease was taken
over can never write a duplicate. Times are seconds since the epoch (UTC) from the writing
client's clock.
"""

from __future__ import annotations

import functools
import io
import json
import logging
import os
import time
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import (
    Column,
    Connection,
    Double,
    Engine,
    ForeignKeyConstraint,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Table,
    Text,
    and_,
    bindparam,
    create_engine,
    delete,
    event,
    func,
    insert,
    inspect,
    select,
    update,
)
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, IntegrityError, OperationalError, SQLAlchemyError

from studies.interrupts import held_signals
from studies.points import Point, Record
from sweeps import metrics as _metrics
from sweeps.errors import StoreError

__all__ = ["Store", "StudyRecord", "METRIC_COLUMNS", "STORE_VERSION", "encode_array",
           "decode_array", "display_url", "sqlite_url_beside", "sqlite_setup"]

logger = logging.getLogger(__name__)

#: Bumped when the table layout changes incompatibly.
STORE_VERSION = 1

#: Result columns: one per metric, in the order of ``sweeps.metrics``.
METRIC_COLUMNS: tuple[str, ...] = tuple(
    getattr(_metrics, "METRIC_NAMES", None) or _metrics.METRIC_UNITS
)

STATUSES = ("planned", "done", "failed")

_md = MetaData()

study_table = Table(
    "filamant_study", _md,
    Column("name", String(200), primary_key=True),
    Column("config_json", Text, nullable=False),
    Column("plan_fingerprint", String(128), nullable=False),
    Column("metrics_fingerprint", String(128)),
    Column("solver_json", Text, nullable=False),
    Column("solver_version", String(32), nullable=False),
    Column("store_version", Integer, nullable=False),
    Column("created_at", Double, nullable=False),
)

points_table = Table(
    "filamant_points", _md,
    Column("study", String(200), primary_key=True),
    Column("point_id", String(32), primary_key=True),
    Column("seq", Integer, nullable=False),
    Column("params_json", Text, nullable=False),
    Column("status", String(16), nullable=False),
    Column("reason", Text),
    Column("attempts", Integer, nullable=False),
    Column("source", String(16), nullable=False),
    Column("created_at", Double, nullable=False),
    Column("updated_at", Double, nullable=False),
    ForeignKeyConstraint(["study"], ["filamant_study.name"], ondelete="CASCADE"),
    Index("filamant_points_status", "study", "status"),
)

results_table = Table(
    "filamant_results", _md,
    Column("study", String(200), primary_key=True),
    Column("point_id", String(32), primary_key=True),
    *(Column(m, Double, nullable=True) for m in METRIC_COLUMNS),
    Column("reasons_json", Text, nullable=False),
    Column("elapsed_s", Double),
    Column("worker", String(200)),
    ForeignKeyConstraint(["study", "point_id"],
                         ["filamant_points.study", "filamant_points.point_id"],
                         ondelete="CASCADE"),
)

responses_table = Table(
    "filamant_responses", _md,
    Column("study", String(200), primary_key=True),
    Column("point_id", String(32), primary_key=True),
    Column("f_hz", LargeBinary, nullable=False),
    Column("z", LargeBinary, nullable=False),
    Column("z0_ohm", LargeBinary, nullable=False),
    ForeignKeyConstraint(["study", "point_id"],
                         ["filamant_points.study", "filamant_points.point_id"],
                         ondelete="CASCADE"),
)

lease_table = Table(
    "filamant_lease", _md,
    Column("study", String(200), primary_key=True),
    Column("owner", String(64), nullable=False),
    Column("host", String(255), nullable=False),
    Column("pid", Integer, nullable=False),
    Column("proc_start", String(32), nullable=False),
    Column("command", String(32), nullable=False),
    Column("started_at", Double, nullable=False),
    Column("heartbeat_at", Double, nullable=False),
)


# Statements of every stored batch, built once: building them per call (expression objects and
# their cache keys) cost about a third of storing a batch of the benchmark study.
_FENCE = (update(lease_table)
          .where(lease_table.c.study == bindparam("b_study"),
                 lease_table.c.owner == bindparam("b_owner"))
          .values(heartbeat_at=bindparam("b_now")))
_PLANNED_AMONG = select(points_table.c.point_id).where(
    points_table.c.study == bindparam("b_study"),
    points_table.c.point_id.in_(bindparam("b_ids", expanding=True)),
    points_table.c.status == "planned")
_FINISH_PLANNED = (update(points_table)
                   .where(points_table.c.study == bindparam("b_study"),
                          points_table.c.point_id == bindparam("b_pid"),
                          points_table.c.status == "planned")
                   .values(status=bindparam("b_status"), reason=bindparam("b_why"),
                           updated_at=bindparam("b_now"), attempts=points_table.c.attempts + 1))
_INSERT_RESULTS = insert(results_table)
_INSERT_RESPONSES = insert(responses_table)


def encode_array(a: NDArray) -> bytes:
    """numpy ``.npy`` bytes of ``a`` (no pickling): the same bytes as ``np.save``.

    The header of each dtype and shape is built once (a study stores arrays of a few shapes
    only); ``np.save`` builds it afresh for every array, which cost a sixth of storing a batch.
    """
    a = np.ascontiguousarray(a)
    if a.dtype.hasobject:  # np.save refuses these without pickling: let it say so
        buf = io.BytesIO()
        np.save(buf, a, allow_pickle=False)
    return _npy_header(a.dtype, a.shape) + a.tobytes()


@functools.lru_cache(maxsize=256)
def _npy_header(dtype: np.dtype, shape: tuple[int, ...]) -> bytes:
    from numpy.lib import format as npy

    buf = io.BytesIO()
    # np.save writes version 1.0 whenever the header fits, as every header here does
    npy.write_array_header_1_0(buf, {"descr": npy.dtype_to_descr(dtype),
                                     "fortran_order": False, "shape": shape})
    return buf.getvalue()


def decode_array(b: bytes) -> NDArray:
    """Inverse of :func:`encode_array`."""
    return np.load(io.BytesIO(bytes(b)), allow_pickle=False)


def display_url(url: str) -> str:
    """The URL with any password hidden (for messages and ``status``)."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except ArgumentError:
        return url


def sqlite_url_beside(config_path: str | os.PathLike[str], name: str) -> str:
    """Default store URL: ``sqlite:///<config dir>/<name>.db``."""
    path = Path(config_path).resolve().parent / f"{name}.db"
    return f"sqlite:///{path}"


@dataclass(frozen=True)
class StudyRecord:
    """The stored description of a study."""

    name: str
    config: dict[str, Any]
    plan_fingerprint: str
    metrics_fingerprint: str | None
    solver: dict[str, Any]
    solver_version: str
    created_at: float


def _flatten(d: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(d, Mapping):
        out: dict[str, Any] = {}
        for k, v in d.items():
            out.update(_flatten(v, f"{prefix}{k}."))
        return out or {prefix[:-1]: {}}
    return {prefix[:-1]: d}


#: Config sections that never change a result (left out of the change messages).
NEUTRAL_SECTIONS = ("study", "cluster", "surrogate")


def _results_part(config: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in config.items() if k not in NEUTRAL_SECTIONS}


def describe_changes(old: Mapping[str, Any], new: Mapping[str, Any], limit: int = 6) -> list[str]:
    """Human list of differing dotted keys between two nested dicts (``"a.b: 1 -> 2"``)."""
    fo, fn = _flatten(old), _flatten(new)
    out = []
    for k in sorted(set(fo) | set(fn)):
        a, b = fo.get(k, "<unset>"), fn.get(k, "<unset>")
        if a != b:
            out.append(f"{k}: {json.dumps(a)} -> {json.dumps(b)}")
    if len(out) > limit:
        out = out[:limit] + [f"... and {len(out) - limit} more"]
    return out


class Store:
    """A study database.

    Parameters
    ----------
    url : str
        SQLAlchemy URL (``sqlite:///path.db``, ``postgresql+psycopg2://user@host/db``, ...).
    create : bool
        Create the file and the tables if missing. With ``create=False`` a missing store raises
        :class:`StoreError` (``status`` and ``export`` never create a store).

    Notes
    -----
    SQLite files are opened in WAL mode with foreign keys on and a 30 s busy timeout; write
    transactions start with ``BEGIN IMMEDIATE`` so two clients never deadlock on a lock upgrade.
    """

    def __init__(self, url: str, *, create: bool = True) -> None:
        self.url = url
        self.display_url = display_url(url)
        try:
            parsed = make_url(url)
        except ArgumentError as exc:
            raise StoreError(f"study.store: not a database URL (got {url!r}): {exc}") from None
        self.is_sqlite = parsed.get_backend_name() == "sqlite"
        if self.is_sqlite:
            db = parsed.database or ""
            if not db or db == ":memory:":
                raise StoreError(f"study.store: an SQLite store needs a file (got {url!r})")
            if not create and not Path(db).is_file():
                raise StoreError(f"{self.display_url}: no store yet; `filamant run` creates it")
        try:
            kw: dict[str, Any] = {}
            if self.is_sqlite:
                kw["connect_args"] = {"timeout": 30.0}
            else:
                kw["pool_pre_ping"] = True
            self.engine: Engine = create_engine(url, **kw)
        except (ArgumentError, ImportError, SQLAlchemyError) as exc:
            raise StoreError(f"study.store: cannot open {self.display_url}: {exc}") from None
        if self.is_sqlite:
            sqlite_setup(self.engine)
        try:
            if create:
                self._create_schema()
            elif not inspect(self.engine).has_table("filamant_study"):
                raise StoreError(f"{self.display_url}: no filamant study tables here; "
                                 "`filamant run` creates them")
        except OperationalError as exc:
            raise StoreError(f"{self.display_url}: cannot use the database: "
                             f"{exc.orig or exc}") from None

    # -- connection helpers -------------------------------------------------------------------

    def close(self) -> None:
        """Release all connections."""
        self.engine.dispose()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextmanager
    def write(self) -> Iterator[Connection]:
        """One write transaction (``BEGIN IMMEDIATE`` on SQLite); commits on success.

        Ctrl-C and SIGTERM wait until the transaction has committed or rolled back
        (:func:`studies.interrupts.held_signals`): an interrupt inside it could leave a pooled
        SQLite connection holding the write lock.
        """
        with held_signals(), \
                self.engine.connect().execution_options(filamant_write=True) as conn:
            with conn.begin():
                yield conn

    @contextmanager
    def read(self) -> Iterator[Connection]:
        """One read transaction (a consistent snapshot)."""
        with self.engine.connect() as conn:
            with conn.begin():
                yield conn

    def _create_schema(self) -> None:
        try:
            with self.write() as conn:  # one writer: never a read-to-write lock upgrade
                _md.create_all(conn, checkfirst=True)
        except (IntegrityError, OperationalError, SQLAlchemyError) as exc:
            # another client may have created them at the same moment
            if not inspect(self.engine).has_table("filamant_lease"):
                raise StoreError(f"{self.display_url}: cannot create the tables: {exc}") from None
        have = {c["name"] for c in inspect(self.engine).get_columns("filamant_results")}
        missing = [m for m in METRIC_COLUMNS if m not in have]
        if missing:
            typ = Double().compile(dialect=self.engine.dialect)
            with self.write() as conn:
                for m in missing:
                    conn.exec_driver_sql(f'ALTER TABLE filamant_results ADD COLUMN "{m}" {typ}')
            logger.info("store: added result columns for new metrics %s", ", ".join(missing))

    # -- studies ------------------------------------------------------------------------------

    def study(self, name: str) -> StudyRecord | None:
        """The stored description of study ``name``, or ``None``."""
        with self.read() as conn:
            row = conn.execute(select(study_table).where(study_table.c.name == name)).first()
        if row is None:
            return None
        return StudyRecord(name=row.name, config=json.loads(row.config_json),
                           plan_fingerprint=row.plan_fingerprint,
                           metrics_fingerprint=row.metrics_fingerprint,
                           solver=json.loads(row.solver_json), solver_version=row.solver_version,
                           created_at=row.created_at)

    def check_compatible(self, name: str, config: Mapping[str, Any], plan_fingerprint: str,
                         solver: Mapping[str, Any], metrics_fingerprint: str | None = None
                         ) -> StudyRecord | None:
        """Refuse a config whose plan, solver settings or metric settings differ from the
        stored study.

        Returns the stored record (``None`` if the study is new).

        Raises
        ------
        StoreError
            Naming the keys that changed, and the remedy (``--fresh`` or a new study name).
        """
        rec = self.study(name)
        if rec is None:
            return None
        solver_new = json.loads(json.dumps(dict(solver)))
        changed = (rec.plan_fingerprint != plan_fingerprint or dict(rec.solver) != solver_new
                   or (metrics_fingerprint is not None and rec.metrics_fingerprint is not None
                       and metrics_fingerprint != rec.metrics_fingerprint))
        problems: list[str] = []
        if changed:
            problems = describe_changes(_results_part(rec.config), _results_part(config))
            problems += [f"solver.{c}" for c in describe_changes(rec.solver, solver_new)]
            problems = problems or ["the plan fingerprint changed"]
        if problems:
            raise StoreError(
                f"{self.display_url}: study {name!r} was stored with other settings "
                f"({'; '.join(problems)}); its results do not belong to this config. Use --fresh "
                "to delete them and start over, or give the study another name"
            )
        return rec

    def create_study(self, name: str, config: Mapping[str, Any], plan_fingerprint: str,
                     solver: Mapping[str, Any], points: Sequence[Point], *, owner: str,
                     metrics_fingerprint: str | None = None) -> None:
        """Store the study's description and its whole plan in one transaction."""
        now = time.time()
        with self.write() as conn:
            self._fence(conn, name, owner)
            conn.execute(insert(study_table).values(
                name=name, config_json=json.dumps(config, sort_keys=True),
                plan_fingerprint=plan_fingerprint, metrics_fingerprint=metrics_fingerprint,
                solver_json=json.dumps(solver, sort_keys=True),
                solver_version=str(solver.get("solver_version", "")),
                store_version=STORE_VERSION, created_at=now))
            self._insert_points(conn, name, points, "planned", now)

    def drop_study(self, name: str, *, owner: str) -> int:
        """Delete every row of study ``name`` (not its lease) in one transaction.

        Returns the number of points deleted.
        """
        with self.write() as conn:
            self._fence(conn, name, owner)
            n = conn.execute(select(func.count()).select_from(points_table)
                             .where(points_table.c.study == name)).scalar_one()
            for t in (responses_table, results_table, points_table):
                conn.execute(delete(t).where(t.c.study == name))
            conn.execute(delete(study_table).where(study_table.c.name == name))
        return int(n)

    # -- points -------------------------------------------------------------------------------

    def _insert_points(self, conn: Connection, study: str, points: Sequence[Point], status: str,
                       now: float) -> None:
        if not points:
            return
        conn.execute(insert(points_table), [
            dict(study=study, point_id=p.point_id, seq=p.seq, params_json=json.dumps(p.params),
                 status=status, reason=None, attempts=0, source=p.source, created_at=now,
                 updated_at=now)
            for p in points
        ])

    def points(self, study: str, status: str | None = None) -> list[Point]:
        """Points of ``study`` in plan order, optionally only those with ``status``."""
        q = select(points_table.c.point_id, points_table.c.params_json, points_table.c.seq,
                   points_table.c.source).where(points_table.c.study == study)
        if status is not None:
            q = q.where(points_table.c.status == status)
        with self.read() as conn:
            rows = conn.execute(q.order_by(points_table.c.seq, points_table.c.point_id)).all()
        return [Point(r.point_id, json.loads(r.params_json), r.seq, r.source) for r in rows]

    def attempts(self, study: str, point_ids: Sequence[str]) -> dict[str, int]:
        """Attempts so far of the given points."""
        with self.read() as conn:
            rows = conn.execute(select(points_table.c.point_id, points_table.c.attempts).where(
                points_table.c.study == study, points_table.c.point_id.in_(list(point_ids))))
            return {r.point_id: r.attempts for r in rows}

    def counts(self, study: str) -> dict[str, int]:
        """``{"planned": n, "done": n, "failed": n, "total": n}`` for ``study``."""
        with self.read() as conn:
            rows = conn.execute(select(points_table.c.status, func.count())
                                .where(points_table.c.study == study)
                                .group_by(points_table.c.status)).all()
        out = dict.fromkeys(STATUSES, 0)
        out.update({r[0]: int(r[1]) for r in rows})
        out["total"] = sum(out[s] for s in STATUSES)
        return out

    def next_seq(self, study: str) -> int:
        """One past the largest ``seq`` of ``study`` (where appended points start)."""
        with self.read() as conn:
            v = conn.execute(select(func.max(points_table.c.seq))
                             .where(points_table.c.study == study)).scalar_one()
        return 0 if v is None else int(v) + 1

    # -- results ------------------------------------------------------------------------------

    def write_batch(self, study: str, records: Sequence[Record], *, owner: str,
                    new_points: Sequence[Point] = ()) -> None:
        """Store one finished batch in one transaction: results, responses and statuses.

        Parameters
        ----------
        study : str
        records : sequence of Record
            Successful records become ``done`` with their results and responses; failed ones
            become ``failed`` with their reason. Each counts one attempt.
        owner : str
            The lease owner; the transaction is refused if the lease is no longer held.
        new_points : sequence of Point
            Points that are not in the plan yet (imports, optimization trials), inserted first.

        Raises
        ------
        StoreError
            If the lease was lost, or a record would duplicate a stored result.
        """
        if not records and not new_points:
            return
        now = time.time()
        ok = [r for r in records if r.ok]
        bad = [r for r in records if not r.ok]
        try:
            with self.write() as conn:
                self._fence(conn, study, owner)
                self._insert_points(conn, study, new_points, "planned", now)
                if ok:
                    conn.execute(_INSERT_RESULTS, [self._result_row(study, r) for r in ok])
                    conn.execute(_INSERT_RESPONSES, [dict(
                        study=study, point_id=r.point_id, f_hz=encode_array(r.f_hz),
                        z=encode_array(r.z), z0_ohm=encode_array(np.atleast_1d(r.z0_ohm)))
                        for r in ok])
                self._set_status(conn, study, ok, "done", now)
                self._set_status(conn, study, bad, "failed", now)
        except IntegrityError as exc:
            raise StoreError(f"{self.display_url}: study {study!r}: refusing to store a duplicate "
                             f"or unplanned result ({exc.orig})") from None

    def _set_status(self, conn: Connection, study: str, records: Sequence[Record], status: str,
                    now: float) -> None:
        if not records:
            return
        ids = [r.point_id for r in records]
        planned = set(conn.execute(_PLANNED_AMONG, {"b_study": study, "b_ids": ids}).scalars())
        stray = [i for i in ids if i not in planned]
        if stray or len(set(ids)) != len(ids):
            raise StoreError(f"{self.display_url}: study {study!r}: point "
                             f"{(stray or ids)[0]} is not a planned point (any more); refusing to "
                             "store it twice")
        conn.execute(_FINISH_PLANNED, [
            {"b_study": study, "b_pid": r.point_id, "b_status": status, "b_why": r.reason or None,
             "b_now": now} for r in records])

    @staticmethod
    def _result_row(study: str, r: Record) -> dict[str, Any]:
        row: dict[str, Any] = dict(study=study, point_id=r.point_id,
                                   reasons_json=json.dumps(r.reasons, sort_keys=True),
                                   elapsed_s=r.elapsed_s, worker=r.worker or None)
        for m in METRIC_COLUMNS:
            v = r.metrics.get(m)
            row[m] = None if v is None else float(v)
        return row

    def record_lost_attempt(self, study: str, point_ids: Sequence[str], reason: str, *,
                            owner: str, max_attempts: int) -> list[str]:
        """Count one attempt of points whose worker died; fail those at ``max_attempts``.

        Returns the ids that are now ``failed``.
        """
        now = time.time()
        failed: list[str] = []
        with self.write() as conn:
            self._fence(conn, study, owner)
            where = and_(points_table.c.study == study,
                         points_table.c.point_id.in_(list(point_ids)),
                         points_table.c.status == "planned")
            conn.execute(update(points_table).where(where)
                         .values(attempts=points_table.c.attempts + 1, updated_at=now))
            rows = conn.execute(select(points_table.c.point_id, points_table.c.attempts)
                                .where(where, points_table.c.attempts >= max_attempts)).all()
            failed = [r.point_id for r in rows]
            if failed:
                conn.execute(update(points_table).where(
                    points_table.c.study == study, points_table.c.point_id.in_(failed))
                    .values(status="failed", updated_at=now,
                            reason=f"gave up after {max_attempts} attempts: {reason}"))
        return failed

    def results(self, study: str) -> list[dict[str, Any]]:
        """Every point of ``study`` with its status and metrics, in plan order.

        Each dict has ``point_id``, ``params`` (dict), ``status``, ``reason``, ``source``,
        ``attempts``, ``reasons`` (dict) and one key per metric (``None`` when missing).
        """
        p, r = points_table, results_table
        q = (select(p.c.point_id, p.c.params_json, p.c.status, p.c.reason, p.c.source,
                    p.c.attempts, r.c.reasons_json, *(r.c[m] for m in METRIC_COLUMNS))
             .select_from(p.outerjoin(r, and_(p.c.study == r.c.study,
                                              p.c.point_id == r.c.point_id)))
             .where(p.c.study == study).order_by(p.c.seq, p.c.point_id))
        with self.read() as conn:
            rows = conn.execute(q).all()
        out = []
        for row in rows:
            d = dict(point_id=row.point_id, params=json.loads(row.params_json),
                     status=row.status, reason=row.reason, source=row.source,
                     attempts=row.attempts,
                     reasons=json.loads(row.reasons_json) if row.reasons_json else {})
            for m in METRIC_COLUMNS:
                d[m] = row._mapping[m]
            out.append(d)
        return out

    def responses(self, study: str, point_ids: Sequence[str] | None = None
                  ) -> Iterator[tuple[str, NDArray, NDArray, NDArray]]:
        """Yield ``(point_id, f_hz (F,), z (F, P, P), z0_ohm (P,))`` of stored responses."""
        p, s = points_table, responses_table
        q = (select(s.c.point_id, s.c.f_hz, s.c.z, s.c.z0_ohm)
             .select_from(s.join(p, and_(p.c.study == s.c.study, p.c.point_id == s.c.point_id)))
             .where(s.c.study == study).order_by(p.c.seq, p.c.point_id))
        if point_ids is not None:
            q = q.where(s.c.point_id.in_(list(point_ids)))
        with self.read() as conn:
            for row in conn.execute(q):
                yield (row.point_id, decode_array(row.f_hz), decode_array(row.z),
                       decode_array(row.z0_ohm))

    # -- lease fencing ------------------------------------------------------------------------

    def _fence(self, conn: Connection, study: str, owner: str) -> None:
        """Refresh the heartbeat of ``owner``'s lease, or raise if it is not held."""
        held = {"b_study": study, "b_owner": owner, "b_now": time.time()}
        n = conn.execute(_FENCE, held).rowcount
        if n != 1:
            raise StoreError(f"{self.display_url}: study {study!r}: this client no longer holds "
                             "the run lease (another client took it over); stopping without "
                             "writing")


def sqlite_setup(engine: Engine) -> None:
    """WAL, foreign keys, busy timeout and real transactions for pysqlite.

    Every engine on a study's SQLite file needs these (the store's, and the optimizer's
    storage in :mod:`studies.optimize`): call it once, right after ``create_engine``.
    """

    @event.listens_for(engine, "connect")
    def _connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = None  # let SQLAlchemy's BEGIN below delimit transactions
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        # durable against any crash of the process (SIGKILL); a power cut may lose the last
        # committed batches, never consistency (they are re-evaluated on resume)
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA busy_timeout=30000")
        cur.close()

    @event.listens_for(engine, "begin")
    def _begin(conn: Connection) -> None:
        write = conn.get_execution_options().get("filamant_write", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")
