"""The tracker: the only module that speaks SQL (SQLAlchemy Core).

Tables (``results_schema/schema.sql`` is the same, written out)::

    meta            name -> value; holds schema_version
    sweeps          one row per spec name: path, digest, first and last run
    sweep_jobs      (sweep, key) -> the sweep's name for the job's dataset, whether its plan holds the job now
    datasets        fingerprint -> name, source, shape, class counts
    configurations  config_id -> worker, block label, canonical parameters (JSON)
    folds           (scheme, fingerprint, repeat, fold) -> test indices (int32 bytes)
    jobs            key -> cell, repeat, fold, state, attempts, owner, lease, timings, error;
                    ``sweep`` and ``dataset`` as the sweep that first planned it named them
    results         key -> metrics, figures (JSON), model text, worker version, host

A job key is shared by every sweep that plans it (on one store, two specs
that plan the same cell share its job and result): ``sweep_jobs`` says which
sweeps plan which jobs, and a sweep's run, status and reports count every
job it plans, whoever ran it.

Job states: ``pending`` → ``running`` (claimed by an owner with a lease) →
``done`` | ``failed``. A running job whose lease expired, or whose owner
process is certainly gone (:mod:`sweep.identity`), goes back to ``pending``. Only the driver
writes, in batched transactions; a result row and its job's ``done`` state
are written in the same transaction, so a kill at any moment leaves either
both or neither.

SQLite (WAL mode, ``synchronous=FULL``, ``BEGIN IMMEDIATE`` for every
writing transaction, a plain deferred ``BEGIN`` for reads, which never wait
for a writer) is the embedded default; a store opened for reading only
(``create=False``) is opened read-only (``mode=ro``), so that a store on a
read-only mount or without write permission can be read. PostgreSQL claims
with ``FOR UPDATE SKIP LOCKED``. Every database error leaves as one
:class:`~sweep.errors.StoreError` line (see :func:`_explain`).
"""

from __future__ import annotations

import json
import os
import secrets
import socket
import time
from dataclasses import dataclass
from typing import Any, Iterable, Literal, Mapping, Sequence
from urllib.parse import quote

import numpy as np
import sqlalchemy as sa

from results_schema import SCHEMA_VERSION
from sweep.errors import NoStoreYet, SchemaVersionError, StoreError
from sweep.text import mask_passwords

JobState = Literal["pending", "running", "done", "failed"]
STATES: tuple[JobState, ...] = ("pending", "running", "done", "failed")

metadata = sa.MetaData()

meta_table = sa.Table(
    "meta", metadata,
    sa.Column("name", sa.String(64), primary_key=True),
    sa.Column("value", sa.Text, nullable=False),
)
sweeps_table = sa.Table(
    "sweeps", metadata,
    sa.Column("name", sa.String(200), primary_key=True),
    sa.Column("spec_path", sa.Text, nullable=False),
    sa.Column("spec_digest", sa.String(64), nullable=False),
    sa.Column("first_run", sa.Float, nullable=False),
    sa.Column("last_run", sa.Float, nullable=False),
)
sweep_jobs_table = sa.Table(
    "sweep_jobs", metadata,
    sa.Column("sweep", sa.String(200), primary_key=True),
    sa.Column("key", sa.String(40), sa.ForeignKey("jobs.key"), primary_key=True),
    sa.Column("dataset", sa.String(200), nullable=False),
    sa.Column("active", sa.Boolean, nullable=False),
)
datasets_table = sa.Table(
    "datasets", metadata,
    sa.Column("fingerprint", sa.String(32), primary_key=True),
    sa.Column("name", sa.String(200), nullable=False),
    sa.Column("source", sa.Text, nullable=False),
    sa.Column("n_samples", sa.Integer, nullable=False),
    sa.Column("n_features", sa.Integer, nullable=False),
    sa.Column("class_counts", sa.Text, nullable=False),
)
configurations_table = sa.Table(
    "configurations", metadata,
    sa.Column("config_id", sa.String(32), primary_key=True),
    sa.Column("worker", sa.String(200), nullable=False),
    sa.Column("label", sa.String(200), nullable=False),
    sa.Column("params", sa.Text, nullable=False),
)
folds_table = sa.Table(
    "folds", metadata,
    sa.Column("scheme", sa.String(64), primary_key=True),
    sa.Column("fingerprint", sa.String(32), primary_key=True),
    sa.Column("repeat", sa.Integer, primary_key=True),
    sa.Column("fold", sa.Integer, primary_key=True),
    sa.Column("test_index", sa.LargeBinary, nullable=False),
    sa.Column("n_test", sa.Integer, nullable=False),
    sa.Column("missing_classes", sa.Text, nullable=False),
)
jobs_table = sa.Table(
    "jobs", metadata,
    sa.Column("key", sa.String(40), primary_key=True),
    sa.Column("sweep", sa.String(200), nullable=False),
    sa.Column("dataset", sa.String(200), nullable=False),
    sa.Column("fingerprint", sa.String(32), nullable=False),
    sa.Column("config_id", sa.String(32), nullable=False),
    sa.Column("scheme", sa.String(64), nullable=False),
    sa.Column("repeat", sa.Integer, nullable=False),
    sa.Column("fold", sa.Integer, nullable=False),
    sa.Column("state", sa.String(10), nullable=False),
    sa.Column("attempts", sa.Integer, nullable=False),
    sa.Column("owner", sa.String(200)),
    sa.Column("lease_expires", sa.Float),
    sa.Column("queued_at", sa.Float, nullable=False),
    sa.Column("started_at", sa.Float),
    sa.Column("finished_at", sa.Float),
    sa.Column("timed_out", sa.Boolean, nullable=False),
    sa.Column("error", sa.Text),
    sa.Index("jobs_by_state", "state"),
)
# A result row repeats its job's identity (dataset, fingerprint, scheme, configuration, repeat, fold) so
# that the reports read one table in order, with no join: a million rows in a few seconds.
results_table = sa.Table(
    "results", metadata,
    sa.Column("key", sa.String(40), sa.ForeignKey("jobs.key"), primary_key=True),
    sa.Column("dataset", sa.String(200), nullable=False),
    sa.Column("fingerprint", sa.String(32), nullable=False),
    sa.Column("scheme", sa.String(64), nullable=False),
    sa.Column("config_id", sa.String(32), nullable=False),
    sa.Column("repeat", sa.Integer, nullable=False),
    sa.Column("fold", sa.Integer, nullable=False),
    sa.Column("accuracy", sa.Float, nullable=False),
    sa.Column("balanced_accuracy", sa.Float, nullable=False),
    sa.Column("kappa", sa.Float, nullable=False),
    sa.Column("train_accuracy", sa.Float, nullable=False),
    sa.Column("fit_seconds", sa.Float, nullable=False),
    sa.Column("predict_seconds", sa.Float, nullable=False),
    sa.Column("figures", sa.Text, nullable=False),
    sa.Column("model_text", sa.Text),
    sa.Column("worker_version", sa.String(64), nullable=False),
    sa.Column("host", sa.String(200), nullable=False),
    sa.Column("finished_at", sa.Float, nullable=False),
)


@dataclass(frozen=True)
class Claimed:
    """A job claimed for running: what the run loop needs to build a workers.Job."""

    key: str
    dataset: str
    fingerprint: str
    config_id: str
    repeat: int
    fold: int
    attempts: int
    #: the job's fold scheme (an inner job's differs from the plan's: sweep.nested)
    scheme: str = ""


def owner_id() -> str:
    """Identity of this driver process (:func:`sweep.identity.owner_id`)."""
    from sweep.identity import owner_id

    return owner_id()


class Store:
    """An open tracker. Create with :meth:`open`."""

    def __init__(self, engine: sa.Engine, url: str, *, readonly: bool = False) -> None:
        self.engine = engine
        #: the same pool, for reads: a deferred transaction that never takes (or waits for) the write lock
        self.reader = engine.execution_options(foldsweep_read=True)
        self.url = url
        self.readonly = readonly
        self.is_sqlite = engine.dialect.name == "sqlite"

    # ---- opening ---------------------------------------------------------------------------

    @classmethod
    def open(cls, url: str, *, create: bool = True) -> "Store":
        """Open (and, if empty and ``create``, initialise) the store at ``url``.

        ``create=False`` opens it for reading only (an SQLite file read-only:
        it may be on a read-only mount). A store of another schema version, a
        database that is not a foldsweep store, an empty or damaged SQLite
        file are refused before anything is written.
        """
        path = sqlite_path(url)
        if path is not None:
            _check_sqlite_file(path, create)
            if create and not os.path.exists(path):
                _create_sqlite_file(path)
        check = path is not None and create and os.path.exists(path)  # a file made before: check it first
        engine = _engine(url, readonly=not create)
        try:
            return cls._opened(engine, url, create, check)
        except StoreError as exc:
            engine.dispose()
            if path is None or create or "unable to open" not in str(exc) or os.access(os.path.dirname(path), os.W_OK):
                raise
            if os.path.exists(path + "-wal") and os.path.getsize(path + "-wal") > 0:
                raise StoreError(f"{path}: cannot read the store: its folder is read-only and it has a write-ahead "
                                 "log (-wal file) that only a writable open can apply; copy the store with its "
                                 "-wal file to a writable folder") from None
        # a read-only folder, no write-ahead log: nothing can change the file while it is read
        engine = _engine(url, readonly=True, immutable=True)
        try:
            return cls._opened(engine, url, create, False)
        except StoreError:
            engine.dispose()
            raise

    @classmethod
    def _opened(cls, engine: sa.Engine, url: str, create: bool, check: bool) -> "Store":
        store = cls(engine, url, readonly=not create)
        if check:
            store._check_integrity()
        version = store._schema_version()
        if version is None:
            if not create:
                raise NoStoreYet(f"{_where(url)}: no foldsweep store here yet (run the sweep first)")
            store._create()
        elif version != SCHEMA_VERSION:
            raise SchemaVersionError(
                f"{_where(url)}: store has schema version {version}, this foldsweep reads version "
                f"{SCHEMA_VERSION}; use the foldsweep release that wrote it, or point 'store' elsewhere")
        if create and store.is_sqlite:
            raw = engine.raw_connection()
            try:
                raw.cursor().execute("PRAGMA journal_mode=WAL")
            finally:
                raw.close()
        return store

    def close(self) -> None:
        self.engine.dispose()

    def drop_connections(self) -> None:
        """Close the pooled connections (the store stays usable: it reconnects when next used).
        Before a fork, so that no child process holds a copy of a live database connection."""
        self.engine.dispose()

    def _schema_version(self) -> int | None:
        names = set(sa.inspect(self.reader).get_table_names())
        if not names:
            return None
        if "meta" not in names:
            raise StoreError(f"{_where(self.url)}: this database holds other tables and is not a "
                             "foldsweep store; point 'store' at a new file or database")
        with self.reader.connect() as conn:
            value: Any = conn.execute(sa.select(meta_table.c.value)
                                 .where(meta_table.c.name == "schema_version")).scalar()
        try:
            return int(value)
        except (TypeError, ValueError):
            raise StoreError(f"{_where(self.url)}: the store's schema_version is unreadable ({value!r})") from None

    def _check_integrity(self) -> None:
        """Refuse a damaged SQLite store before a run writes into it (``PRAGMA quick_check``: every page
        read once; reads catch damage as they meet it)."""
        with self.reader.connect() as conn:
            found = [row[0] for row in conn.exec_driver_sql("PRAGMA quick_check(3)")]
        if found != ["ok"]:
            raise StoreError(f"{_where(self.url)}: the store is damaged (PRAGMA integrity_check: "
                             f"{'; '.join(found)[:200]}); foldsweep will not write into it; restore it from a backup")

    def _create(self) -> None:
        with self.engine.begin() as conn:
            if conn.dialect.name == "postgresql":  # two drivers creating one store: one at a time
                conn.exec_driver_sql("SELECT pg_advisory_xact_lock(2718281828)")
            _create_schema(conn)

    # ---- registering what a plan needs ----------------------------------------------------

    def record_sweep(self, name: str, spec_path: str, digest: str) -> None:
        now = time.time()
        with self.engine.begin() as conn:
            _insert_new(conn, sweeps_table, [dict(name=name, spec_path=spec_path, spec_digest=digest,
                                                  first_run=now, last_run=now)])
            conn.execute(sa.update(sweeps_table).where(sweeps_table.c.name == name)
                         .values(spec_path=spec_path, spec_digest=digest, last_run=now))

    def sweep_fingerprints(self, sweep: str) -> dict[str, set[str]]:
        """Dataset name -> fingerprints this sweep has jobs for (to detect a changed dataset)."""
        m = sweep_jobs_table.c
        query = (sa.select(m.dataset, jobs_table.c.fingerprint).distinct()
                 .select_from(sweep_jobs_table.join(jobs_table, jobs_table.c.key == m.key)).where(m.sweep == sweep))
        found: dict[str, set[str]] = {}
        with self.reader.connect() as conn:
            for name, fp in conn.execute(query):
                found.setdefault(name, set()).add(fp)
        return found

    def record_datasets(self, rows: Sequence[Mapping[str, Any]]) -> None:
        self._insert_missing(datasets_table, "fingerprint", rows)

    def record_configurations(self, rows: Sequence[Mapping[str, Any]]) -> None:
        self._insert_missing(configurations_table, "config_id", rows)

    def _insert_missing(self, table: sa.Table, key: str, rows: Sequence[Mapping[str, Any]]) -> None:
        with self.engine.begin() as conn:
            have = {r[0] for r in conn.execute(sa.select(table.c[key])).cursor.fetchall()}
            new = [dict(r) for r in rows if r[key] not in have]
            if new:
                _insert_new(conn, table, new)

    def has_folds(self, scheme: str, fingerprint: str) -> bool:
        query = sa.select(sa.func.count()).select_from(folds_table).where(
            folds_table.c.scheme == scheme, folds_table.c.fingerprint == fingerprint)
        with self.reader.connect() as conn:
            return bool(conn.execute(query).scalar())

    def record_folds(self, scheme: str, fingerprint: str, folds: Iterable[Any]) -> None:
        rows = [dict(scheme=scheme, fingerprint=fingerprint, repeat=f.repeat, fold=f.fold,
                     test_index=np.asarray(f.test_index, dtype="<i4").tobytes(), n_test=len(f.test_index),
                     missing_classes=json.dumps(list(f.missing_classes))) for f in folds]
        with self.engine.begin() as conn:
            _insert_new(conn, folds_table, rows)  # another driver may have just stored the same folds

    def load_folds(self, scheme: str, fingerprint: str) -> dict[tuple[int, int], np.ndarray]:
        """(repeat, fold) -> test indices, as stored."""
        query = sa.select(folds_table.c.repeat, folds_table.c.fold, folds_table.c.test_index).where(
            folds_table.c.scheme == scheme, folds_table.c.fingerprint == fingerprint)
        with self.reader.connect() as conn:
            return {(r, f): np.frombuffer(b, dtype="<i4").astype(np.int64) for r, f, b in conn.execute(query)}

    def fold_warnings(self, scheme: str, fingerprint: str) -> list[tuple[int, int, list[int]]]:
        query = sa.select(folds_table.c.repeat, folds_table.c.fold, folds_table.c.missing_classes).where(
            folds_table.c.scheme == scheme, folds_table.c.fingerprint == fingerprint,
            folds_table.c.missing_classes != "[]")
        with self.reader.connect() as conn:
            return [(r, f, json.loads(m)) for r, f, m in conn.execute(query)]

    # ---- jobs ------------------------------------------------------------------------------

    def sync_jobs(self, sweep: str, scheme: str, planned: Sequence[Any]) -> int:
        """Make ``planned`` the sweep's jobs: insert the jobs new to the store, record that the sweep plans
        each (under its name for the job's dataset), and retire the sweep's jobs the plan no longer holds.

        Returns how many jobs were new to the store. Existing jobs keep their state, whoever ran them.
        """
        now = time.time()
        wanted = {j.key: j for j in planned}
        m = sweep_jobs_table.c
        with self.engine.begin() as conn:
            have = {k: (d, bool(a)) for k, d, a in conn.execute(
                sa.select(m.key, m.dataset, m.active).where(m.sweep == sweep)).cursor.fetchall()}
            joining = [j for k, j in wanted.items() if k not in have]
            new = joining
            stored = conn.execute(sa.select(sa.func.count()).select_from(jobs_table)).scalar() or 0
            if joining and stored > len(have):  # a store shared by several specs: some keys may be planned already
                elsewhere = self._keys_stored(conn, [j.key for j in joining])
                new = [j for j in joining if j.key not in elsewhere]
            for chunk in _chunks(new, 5000):
                _insert_new(conn, jobs_table, [
                    dict(key=j.key, sweep=sweep, dataset=j.dataset, fingerprint=j.fingerprint,
                         config_id=j.config_id, scheme=getattr(j, "scheme", "") or scheme, repeat=j.repeat, fold=j.fold, state="pending",
                         attempts=0, queued_at=now, timed_out=False) for j in chunk])
            for chunk in _chunks(joining, 5000):
                _insert_new(conn, sweep_jobs_table, [dict(sweep=sweep, key=j.key, dataset=j.dataset, active=True)
                                                     for j in chunk])
            changed = [dict(k=k, b_dataset=wanted[k].dataset, b_active=True) for k, (d, a) in have.items()
                       if k in wanted and (d, a) != (wanted[k].dataset, True)]
            changed += [dict(k=k, b_dataset=d, b_active=False) for k, (d, a) in have.items() if a and k not in wanted]
            if changed:
                conn.execute(sa.update(sweep_jobs_table).where(m.sweep == sweep, m.key == sa.bindparam("k"))
                             .values(dataset=sa.bindparam("b_dataset"), active=sa.bindparam("b_active")), changed)
        return len(new)

    def _keys_stored(self, conn: sa.Connection, keys: list[str]) -> set[str]:
        found: set[str] = set()
        for chunk in _chunks(keys, 900):
            found.update(conn.execute(sa.select(jobs_table.c.key).where(jobs_table.c.key.in_(chunk))).scalars())
        return found

    def counts(self, sweep: str, scheme: str | None = None) -> dict[str, int]:
        """Jobs per state, for the jobs ``sweep`` plans (whoever ran them; of fold scheme ``scheme`` only,
        if given)."""
        m = sweep_jobs_table.c
        only = [] if scheme is None else [jobs_table.c.scheme == scheme]
        query = (sa.select(jobs_table.c.state, sa.func.count())
                 .select_from(sweep_jobs_table.join(jobs_table, jobs_table.c.key == m.key))
                 .where(m.sweep == sweep, m.active, *only).group_by(jobs_table.c.state))
        with self.reader.connect() as conn:
            found: dict[str, int] = {str(s): int(n) for s, n in conn.execute(query).all()}
        return {state: int(found.get(state, 0)) for state in STATES}

    def requeue_stale(self, sweep: str, now: float | None = None) -> int:
        """Put back to pending the running jobs whose lease expired or whose owner here is dead."""
        now = time.time() if now is None else now
        host = socket.gethostname()
        with self.engine.begin() as conn:
            rows = conn.execute(sa.select(jobs_table.c.key, jobs_table.c.owner, jobs_table.c.lease_expires)
                                .where(jobs_table.c.state == "running", _planned_by(sweep, active=False))).all()
            stale = [k for k, owner, lease in rows
                     if (lease is not None and lease < now) or _dead_here(owner, host)]
            for chunk in _chunks(stale, 900):
                # the attempt was not the job's fault: its driver died or lost touch
                conn.execute(sa.update(jobs_table).where(jobs_table.c.key.in_(chunk), jobs_table.c.state == "running")
                             .values(state="pending", owner=None, lease_expires=None,
                                     attempts=sa.case((jobs_table.c.attempts > 0, jobs_table.c.attempts - 1), else_=0)))
        return len(stale)

    def retry_failed(self, sweep: str) -> int:
        with self.engine.begin() as conn:
            result = conn.execute(sa.update(jobs_table)
                                  .where(jobs_table.c.state == "failed", _planned_by(sweep))
                                  .values(state="pending", attempts=0, error=None, timed_out=False))
        return int(result.rowcount or 0)

    def claim(self, sweep: str, owner: str, n: int, lease_seconds: float, max_attempts: int) -> list[Claimed]:
        """Atomically take up to ``n`` pending jobs of ``sweep`` for ``owner``."""
        now = time.time()
        c = jobs_table.c
        name = _sweeps_name(sweep)
        query = (sa.select(c.key, name, c.fingerprint, c.config_id, c.repeat, c.fold, c.attempts, c.scheme)
                 .where(c.state == "pending", c.attempts < max_attempts, _planned_by(sweep))
                 .limit(n).with_for_update(of=jobs_table, skip_locked=True))
        # no ORDER BY: sorting every pending job at every claim costs O(pending) per claim; SQLite walks the
        # state index in insertion order, i.e. plan order, and any order is correct
        with self.engine.begin() as conn:
            rows = conn.execute(query).all()
            for chunk in _chunks([r[0] for r in rows], 900):
                conn.execute(sa.update(jobs_table).where(c.key.in_(chunk))
                             .values(state="running", owner=owner, lease_expires=now + lease_seconds,
                                     started_at=now, attempts=c.attempts + 1))
        return [Claimed(r[0], r[1], r[2], r[3], r[4], r[5], r[6] + 1, r[7]) for r in rows]

    def renew(self, owner: str, keys: Sequence[str], lease_seconds: float) -> None:
        expires = time.time() + lease_seconds
        with self.engine.begin() as conn:
            for chunk in _chunks(list(keys), 900):
                conn.execute(sa.update(jobs_table).where(jobs_table.c.key.in_(chunk), jobs_table.c.owner == owner,
                                                         jobs_table.c.state == "running")
                             .values(lease_expires=expires))

    def release_all(self, owner: str) -> None:
        """Give back every job ``owner`` still holds, without counting an attempt (Ctrl-C)."""
        with self.engine.begin() as conn:
            conn.execute(sa.update(jobs_table).where(jobs_table.c.owner == owner, jobs_table.c.state == "running")
                         .values(state="pending", owner=None, lease_expires=None,
                                 attempts=sa.case((jobs_table.c.attempts > 0, jobs_table.c.attempts - 1), else_=0)))

    def release(self, owner: str, keys: Sequence[str], *, count_attempt: bool = False) -> None:
        """Give claimed jobs back (pending) without a result."""
        values: dict[str, Any] = dict(state="pending", owner=None, lease_expires=None)
        if not count_attempt:
            values["attempts"] = jobs_table.c.attempts - 1
        with self.engine.begin() as conn:
            for chunk in _chunks(list(keys), 900):
                conn.execute(sa.update(jobs_table).where(jobs_table.c.key.in_(chunk), jobs_table.c.owner == owner,
                                                         jobs_table.c.state == "running").values(**values))

    def commit_results(self, owner: str, results: Sequence[Any], give_up: Mapping[str, str] | None = None) -> int:
        """Write finished jobs in one transaction; returns how many were written.

        ``results`` are :class:`workers.job.JobResult`; ok results become a
        results row plus state ``done``, failed ones state ``failed`` with the
        error. ``give_up`` maps keys of jobs whose worker died for the last
        time to the reason. A result for a job this owner no longer holds
        (its lease was taken over) is dropped, so no result is ever duplicated.
        """
        with self.engine.begin() as conn:
            held = self._held(conn, owner, [r.key for r in results] + list(give_up or ()))
            ok = [r for r in results if r.ok and r.key in held]
            if ok:
                conn.execute(sa.insert(results_table), [{**held[r.key], **_result_row(r)} for r in ok])
            now = time.time()
            updates = [dict(k=r.key, b_state="done" if r.ok else "failed", b_finished=r.finished_at,
                            b_started=r.started_at, b_error=r.error, b_timed_out=r.timed_out)
                       for r in results if r.key in held]
            updates += [dict(k=key, b_state="failed", b_finished=now, b_started=None, b_error=reason,
                             b_timed_out=False) for key, reason in (give_up or {}).items() if key in held]
            if updates:
                j = jobs_table.c
                conn.execute(sa.update(jobs_table).where(j.key == sa.bindparam("k")).values(
                    state=sa.bindparam("b_state"), owner=None, lease_expires=None,
                    finished_at=sa.bindparam("b_finished"),
                    started_at=sa.func.coalesce(sa.bindparam("b_started", type_=sa.Float), j.started_at),
                    error=sa.bindparam("b_error"), timed_out=sa.bindparam("b_timed_out")), updates)
        return len(updates)

    def _held(self, conn: sa.Connection, owner: str, keys: list[str]) -> dict[str, dict[str, Any]]:
        """key -> the job's identity columns, for the jobs among ``keys`` that ``owner`` holds."""
        j = jobs_table.c
        held: dict[str, dict[str, Any]] = {}
        for chunk in _chunks(keys, 900):
            for row in conn.execute(sa.select(j.key, j.dataset, j.fingerprint, j.scheme, j.config_id, j.repeat, j.fold)
                                    .where(j.key.in_(chunk), j.owner == owner, j.state == "running")):
                held[row.key] = dict(row._mapping)
        return held

    # ---- reading ---------------------------------------------------------------------------

    def held_by_gone(self, keys: Sequence[str], now: float | None = None) -> set[str]:
        """The keys among ``keys`` of running jobs whose driver is gone (its lease expired, or it is
        certainly dead: :func:`sweep.identity.is_gone`); the next run gives them back to pending."""
        now = time.time() if now is None else now
        j = jobs_table.c
        gone: set[str] = set()
        with self.reader.connect() as conn:
            for chunk in _chunks(list(keys), 900):
                for key, owner, lease in conn.execute(sa.select(j.key, j.owner, j.lease_expires)
                                                      .where(j.key.in_(chunk), j.state == "running")):
                    if (lease is not None and lease < now) or _dead_here(owner, ""):
                        gone.add(key)
        return gone

    def job_states(self, keys: Sequence[str]) -> dict[str, tuple[str, str | None, bool]]:
        """key -> (state, error, timed_out) of the stored jobs among ``keys`` (whichever sweeps plan them)."""
        j = jobs_table.c
        found: dict[str, tuple[str, str | None, bool]] = {}
        with self.reader.connect() as conn:
            for chunk in _chunks(list(keys), 900):
                for key, state, error, timed_out in conn.execute(
                        sa.select(j.key, j.state, j.error, j.timed_out).where(j.key.in_(chunk))):
                    found[key] = (state, error, bool(timed_out))
        return found

    def done_results(self, *, scheme: str, fingerprints: Sequence[str], repeats: int, k: int,
                     figures: bool = True, keys: bool = True, hosts: bool = True,
                     metrics: Sequence[str], names: Mapping[str, str] | None = None,
                     ) -> tuple[list[tuple[Any, ...]], list[str]]:
        """(rows, column names) of the results on these datasets (fingerprints) and folds, with the
        ``metrics`` columns and each row's ``worker_version`` (with ``hosts``, its ``host`` too).

        ``names`` (fingerprint -> dataset name) names each row's dataset as the caller's spec does; else it
        is the name under which the job was first planned (a result is shared by every sweep that plans
        its job, whatever each calls the data).

        One scan of the results table, no join. The caller keeps the rows of
        its plan's configurations and worker versions.
        """
        r = results_table.c
        dataset = sa.case(dict(names), value=r.fingerprint, else_=r.dataset).label("dataset") if names else r.dataset
        columns = [dataset, r.config_id, r.repeat, r.fold, *(r[name] for name in metrics)]
        columns = ([r.key] if keys else []) + columns + [r.worker_version] + ([r.host] if hosts else [])
        if figures:
            columns.append(r.figures)
        query = sa.select(*columns).where(*self._on(scheme, fingerprints, repeats, k))
        with self.reader.connect() as conn:
            result = conn.execute(query)
            # plain DBAPI tuples: a million SQLAlchemy Row objects cost more than the query itself
            return list(result.cursor.fetchall()), list(result.keys())

    @staticmethod
    def _on(scheme: str, fingerprints: Sequence[str], repeats: int, k: int) -> list[Any]:
        r = results_table.c
        return [r.scheme == scheme, r.fingerprint.in_(list(fingerprints)), r.repeat < repeats, r.fold < k]

    def configurations(self) -> dict[str, tuple[str, str, dict[str, Any]]]:
        """config_id -> (worker, label, parameters)."""
        with self.reader.connect() as conn:
            rows = conn.execute(sa.select(configurations_table)).all()
        return {r.config_id: (r.worker, r.label, json.loads(r.params)) for r in rows}

    def failures(self, sweep: str) -> list[tuple[str, str | None, bool]]:
        """(key, error, timed_out) of the failed active jobs of ``sweep``."""
        j = jobs_table.c
        with self.reader.connect() as conn:
            return [tuple(r) for r in conn.execute(sa.select(j.key, j.error, j.timed_out).where(
                j.state == "failed", _planned_by(sweep)))]

    # ---- reading for the reports (sweep.results): the tracker alone, no dataset file ---------

    def sweep_datasets(self, sweep: str) -> dict[str, str]:
        """Dataset name -> fingerprint of the jobs ``sweep`` plans: the data its results were computed on,
        under the names its spec gave them when it was last planned (reports need no dataset file)."""
        m = sweep_jobs_table.c
        query = (sa.select(m.dataset, jobs_table.c.fingerprint).distinct()
                 .select_from(sweep_jobs_table.join(jobs_table, jobs_table.c.key == m.key))
                 .where(m.sweep == sweep, m.active))
        with self.reader.connect() as conn:
            return dict(conn.execute(query).all())

    def cell_counts(self, sweep: str, states: Sequence[str] = STATES,
                    scheme: str | None = None) -> list[tuple[str, str, str, int]]:
        """(dataset, config_id, state, jobs) over the jobs ``sweep`` plans in ``states`` (whoever ran them;
        the dataset under the sweep's own name). Driven by the state index, so that leaving out "done"
        reads only the unfinished jobs. Of fold scheme ``scheme`` only, if given (the plan's: no inner job
        of nested selection)."""
        j = jobs_table.c
        only = [] if scheme is None else [j.scheme == scheme]
        name = _sweeps_name(sweep).label("dataset")
        query = (sa.select(name, j.config_id, j.state, sa.func.count())
                 .where(j.state.in_(list(states)), _planned_by(sweep), *only)
                 .group_by(name, j.config_id, j.state))
        with self.reader.connect() as conn:
            return [(d, c, s, int(n)) for d, c, s, n in conn.execute(query)]

    def failed_jobs(self, sweep: str) -> list[dict[str, Any]]:
        """The failed jobs ``sweep`` plans: key, dataset (the sweep's name for it), config_id, repeat, fold,
        attempts, error, timed_out."""
        j = jobs_table.c
        name = _sweeps_name(sweep).label("dataset")
        query = (sa.select(j.key, name, j.config_id, j.repeat, j.fold, j.attempts, j.error, j.timed_out)
                 .where(j.state == "failed", _planned_by(sweep))
                 .order_by(name, j.config_id, j.repeat, j.fold))
        with self.reader.connect() as conn:
            return [dict(r._mapping) for r in conn.execute(query)]

    def dataset_records(self, fingerprints: Sequence[str]) -> list[dict[str, Any]]:
        """The datasets table's rows (fingerprint, name, source, shape, class counts) for ``fingerprints``."""
        query = sa.select(datasets_table).where(datasets_table.c.fingerprint.in_(list(fingerprints)))
        with self.reader.connect() as conn:
            return [dict(r._mapping) for r in conn.execute(query)]

    def stored_model(self, key: str) -> dict[str, Any] | None:
        """The result row of job ``key`` as far as a reader of its model wants it (None: no result)."""
        c = results_table.c
        with self.reader.connect() as conn:
            row = conn.execute(sa.select(c.accuracy, c.train_accuracy, c.worker_version, c.model_text)
                               .where(c.key == key)).first()
        return None if row is None else dict(row._mapping)


def _planned_by(sweep: str, *, active: bool = True) -> Any:
    """Condition on ``jobs``: the job is one ``sweep`` plans (now, or ever when not ``active``).

    A correlated EXISTS, so that a claim walks the pending jobs by the state index and probes the
    membership's primary key for each: O(jobs claimed), not O(jobs of the sweep), per claim."""
    m = sweep_jobs_table.c
    return sa.exists().where(m.sweep == sweep, m.key == jobs_table.c.key, *([m.active] if active else []))


def _sweeps_name(sweep: str) -> Any:
    """Column expression on ``jobs``: what ``sweep`` calls the job's dataset (another sweep may have
    planned the job first, under another name)."""
    m = sweep_jobs_table.c
    return sa.select(m.dataset).where(m.sweep == sweep, m.key == jobs_table.c.key).scalar_subquery()


def _result_row(r: Any) -> dict[str, Any]:
    return dict(key=r.key, accuracy=r.accuracy, balanced_accuracy=r.balanced_accuracy, kappa=r.kappa,
                train_accuracy=r.train_accuracy, fit_seconds=r.fit_seconds, predict_seconds=r.predict_seconds,
                figures=json.dumps(r.figures, sort_keys=True), model_text=r.model_text,
                worker_version=r.worker_version, host=r.host, finished_at=r.finished_at)


def _insert_new(conn: sa.Connection, table: sa.Table, rows: Sequence[Mapping[str, Any]]) -> None:
    """Insert ``rows``, skipping those whose primary key is already stored.

    Several drivers starting on one store register the same sweep, datasets,
    folds and jobs at the same moment; the second must not fail on the first's rows.
    """
    if conn.dialect.name == "sqlite":
        from sqlalchemy.dialects.sqlite import insert
    elif conn.dialect.name == "postgresql":
        from sqlalchemy.dialects.postgresql import insert  # type: ignore[assignment]
    else:
        conn.execute(sa.insert(table), list(rows))
        return
    conn.execute(insert(table).on_conflict_do_nothing(), list(rows))


def _engine(url: str, *, readonly: bool = False, immutable: bool = False) -> sa.Engine:
    try:
        path = sqlite_path(url)
        if path is not None:
            if readonly:  # a URI, so that the path's own "?" or "%" stay part of the file name
                flag = "immutable=1" if immutable else "mode=ro"
                target = sa.engine.URL.create("sqlite", database=f"file:{quote(path)}?{flag}", query={"uri": "true"})
            else:
                target = sa.engine.URL.create("sqlite", database=path)
            engine = sa.create_engine(target, connect_args={"timeout": 60, "isolation_level": None})
            sa.event.listen(engine, "connect", _sqlite_connect)
            sa.event.listen(engine, "begin", _sqlite_begin)
        else:
            engine = sa.create_engine(url, pool_pre_ping=True)
    except (sa.exc.ArgumentError, ImportError, sa.exc.NoSuchModuleError, ValueError, TypeError) as exc:
        raise StoreError(mask_passwords(f"store {url!r}: not a usable SQLAlchemy URL ({_one_line(exc)}); give a "
                                        "file path, or a URL such as postgresql+psycopg://USER@HOST:5432/DB")) from None
    sa.event.listen(engine, "handle_error", lambda context: _explain(url, context))
    return engine


def sqlite_path(url: str) -> str | None:
    """The file of an SQLite store URL (``%XX`` decoded, as SQLAlchemy does), None for another database."""
    try:
        parsed = sa.engine.make_url(url)
    except (sa.exc.ArgumentError, ValueError, TypeError) as exc:
        raise StoreError(mask_passwords(f"store {url!r}: not a usable SQLAlchemy URL ({_one_line(exc)}); give a "
                                        "file path, or a URL such as postgresql+psycopg://USER@HOST:5432/DB")) from None
    if parsed.get_backend_name() != "sqlite":
        return None
    if not parsed.database or parsed.database == ":memory:" or "mode=memory" in parsed.database:
        raise StoreError(f"store {url!r}: an in-memory SQLite database keeps nothing after the command ends; "
                         "give a file path (store = \"sweep.sqlite\") or a sqlite:////absolute/path URL")
    return os.path.abspath(parsed.database)


def _create_schema(conn: sa.Connection) -> None:
    metadata.create_all(conn)
    _insert_new(conn, meta_table, [{"name": "schema_version", "value": str(SCHEMA_VERSION)}])


def _create_sqlite_file(path: str) -> None:
    """Make a new SQLite store whole before it appears under its name: built in a temporary file in
    the same folder, then hard-linked into place. A driver starting at the same instant sees either
    no file or a complete store, never the empty file SQLite writes first (refused as damaged)."""
    tmp = f"{path}.new-{os.getpid()}-{secrets.token_hex(4)}"
    engine = sa.create_engine(sa.engine.URL.create("sqlite", database=tmp))
    try:
        with engine.begin() as conn:
            _create_schema(conn)
    finally:
        engine.dispose()
    try:
        os.link(tmp, path)  # fails if another driver linked its store first: that one is used
    except FileExistsError:
        pass
    except OSError:  # a file system without hard links: a rename, unless a store appeared meanwhile
        if not os.path.exists(path):
            os.rename(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _check_sqlite_file(path: str, create: bool) -> None:
    """Refuse, before SQLite opens it, an SQLite store that cannot be one (without writing to it)."""
    if not os.path.exists(path):
        if not create:
            raise NoStoreYet(f"{path}: no foldsweep store here yet (run the sweep first)")
        if not os.path.isdir(os.path.dirname(path)):
            raise StoreError(f"{path}: the store's folder {os.path.dirname(path)} does not exist; create it first")
        return
    if os.path.isdir(path):
        raise StoreError(f"{path}: is a folder, not a store file; point 'store' at a file")
    if os.path.getsize(path) == 0:
        raise StoreError(f"{path}: the store file is empty (0 bytes), not a foldsweep store (a copy or a disk that "
                         "failed?); restore it from a backup, or delete it to start a new store")


def _explain(url: str, context: Any) -> None:
    """SQLAlchemy's ``handle_error`` hook: every database error leaves as one :class:`StoreError` line
    saying what happened and what was kept (a transaction is all or nothing: what was committed stays)."""
    if context.is_pre_ping:
        return  # the pool's liveness probe: it reconnects by itself
    error = context.original_exception
    detail = _one_line(error)
    text = detail.lower()
    where = _where(url)
    if "malformed" in text or "not a database" in text or "corrupt" in text:
        message = (f"the store is damaged ({detail}); check it with PRAGMA integrity_check and restore it from "
                   "a backup; foldsweep will not write into it")
    elif "disk is full" in text or "no space left" in text or "could not extend" in text:
        message = (f"the disk is full ({detail}); the transaction under way was rolled back and nothing "
                   "committed was lost; free some space and run again to resume")
    elif "readonly" in text or "read-only" in text:
        message = (f"the store cannot be written ({detail}); the transaction under way was rolled back and "
                   "nothing committed was lost; make it writable and run again to resume")
    elif "disk i/o error" in text:
        message = (f"the disk failed a read or write ({detail}); the transaction under way was rolled back "
                   "and nothing committed was lost; check the disk, then run again to resume")
    elif "database is locked" in text:
        message = (f"another process held the store's write lock for 60 s ({detail}); nothing was changed; "
                   "try again once it is done")
    elif isinstance(context.sqlalchemy_exception, sa.exc.OperationalError):  # e.g. a server out of reach
        message = f"the database failed ({detail}); nothing was changed by the transaction under way"
    else:
        return  # a constraint or SQL error is a bug of foldsweep's: its traceback is worth seeing
    raise StoreError(mask_passwords(f"{where}: {message}")) from None


def _sqlite_connect(dbapi_connection: Any, record: Any) -> None:
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA busy_timeout = 60000")
    # FULL in WAL mode: each commit is on disk before it returns, so a power cut or an OS crash
    # loses no committed batch (NORMAL may lose the batches since the last checkpoint)
    cursor.execute("PRAGMA synchronous = FULL")
    cursor.execute("PRAGMA foreign_keys = ON")
    cursor.close()


def _sqlite_begin(conn: sa.Connection) -> None:
    if conn.get_execution_options().get("foldsweep_read"):
        conn.exec_driver_sql("BEGIN")  # deferred: a WAL reader never waits for the writer
    else:
        # a writing transaction takes the write lock up front: claims from two drivers cannot interleave
        conn.exec_driver_sql("BEGIN IMMEDIATE")


def _dead_here(owner: str | None, host: str) -> bool:
    """Whether ``owner`` is certainly gone (``host`` is unused: :func:`sweep.identity.is_gone` checks
    the host along with the boot and the PID namespace)."""
    from sweep.identity import is_gone

    return is_gone(owner)


def _chunks(items: Sequence[Any], size: int) -> Iterable[Sequence[Any]]:
    for start in range(0, len(items), size):
        yield items[start:start + size]


def _where(url: str) -> str:
    """How messages name a store: an SQLite file by its path, another database by its URL (password masked)."""
    try:
        path = sqlite_path(url)
        return path if path is not None else sa.engine.make_url(url).render_as_string()
    except StoreError:
        return mask_passwords(url)


def _one_line(exc: BaseException) -> str:
    return mask_passwords(" ".join(str(getattr(exc, "orig", None) or exc).split())[:300])


def schema_sql() -> str:
    """The tables as SQLite DDL: what ``results_schema/schema.sql`` holds (a test keeps them equal)."""
    from sqlalchemy.dialects import sqlite
    from sqlalchemy.schema import CreateIndex, CreateTable

    parts = [f"-- foldsweep tracker, schema version {SCHEMA_VERSION} (generated from sweep/store.py)\n"]
    for table in metadata.sorted_tables:
        parts.append(str(CreateTable(table).compile(dialect=sqlite.dialect())).strip() + ";\n")
        for index in sorted(table.indexes, key=lambda i: i.name or ""):
            parts.append(str(CreateIndex(index).compile(dialect=sqlite.dialect())).strip() + ";\n")
    return "\n".join(parts)
