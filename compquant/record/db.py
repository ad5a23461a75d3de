"""Opening the lab's record: where it is, its schema version, its transactions and errors.

One SQLite file by default, or a server (PostgreSQL) chosen by a database URL; the same code runs
on both through SQLAlchemy Core.  :func:`open_record` creates a new record on first use, upgrades
an older schema with the migrations shipped in ``compquant/record/migrations`` (Alembic), and
refuses, with one clear line, a record written by a newer compquant, a file that is not an SQLite
database, an SQLite database of another program, or a damaged file: a record is never reset.

Where the record is (first found wins): the ``--db`` option (a path or a URL), the environment
variable ``COMPQUANT_DB``, then the per-user data folder (:func:`default_location`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import getpass
import json
import os
import sys
from collections.abc import Iterator
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy import event

from compquant.errors import CompquantError
from compquant.record import schema as S

DB_ENV = "COMPQUANT_DB"
USER_ENV = "COMPQUANT_USER"
APPLICATION = "compquant-record"
#: SQLite header field ``application_id`` (offset 68) of a compquant record: "CQRC"
SQLITE_APPLICATION_ID = 0x43515243
SQLITE_MAGIC = b"SQLite format 3\x00"
MIGRATIONS = Path(__file__).parent / "migrations"


class RecordError(CompquantError):
    """The record cannot be opened or a review step is not allowed."""

    kind = "record"


def now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def current_user() -> str:
    """Who acts: ``COMPQUANT_USER`` if set, else the login name."""
    env = os.environ.get(USER_ENV, "").strip()
    if env:
        return env
    try:
        return getpass.getuser()
    except Exception:  # no login name (some containers)
        return "unknown user"


def default_location() -> Path:
    """Per-user data folder: ``$XDG_DATA_HOME/compquant/record.sqlite`` (default
    ``~/.local/share``) on Linux, ``~/Library/Application Support/compquant`` on macOS,
    ``%LOCALAPPDATA%\\compquant`` on Windows."""
    if sys.platform == "win32":
        base = Path(os.environ.get("LOCALAPPDATA") or Path.home() / "AppData" / "Local")
    elif sys.platform == "darwin":
        base = Path.home() / "Library" / "Application Support"
    else:
        base = Path(os.environ.get("XDG_DATA_HOME") or Path.home() / ".local" / "share")
    return base / "compquant" / "record.sqlite"


def is_url(db) -> bool:
    return "://" in str(db)


def resolve(db=None) -> str:
    """The record's location as given (``--db``), from ``COMPQUANT_DB``, or the default path."""
    if db not in (None, ""):
        return str(db)
    env = os.environ.get(DB_ENV, "").strip()
    return env if env else str(default_location())


def configured(db=None) -> str | None:
    """The record to store analyses in: ``db`` or ``COMPQUANT_DB``; None when neither is set."""
    if db not in (None, ""):
        return str(db)
    return os.environ.get(DB_ENV, "").strip() or None


def shown(location: str) -> str:
    """A record location fit to print: a URL's password hidden."""
    if not is_url(location):
        return str(location)
    try:
        return sa.make_url(location).render_as_string(hide_password=True)
    except sa.exc.ArgumentError:
        return "<database URL>"


def _display(url: sa.engine.URL) -> str:
    return url.render_as_string(hide_password=True)


def _sqlite_engine(path: Path) -> sa.Engine:
    eng = sa.create_engine(f"sqlite:///{path}", connect_args={"timeout": 120})

    @event.listens_for(eng, "connect")
    def _connect(dbapi_conn, _rec):
        dbapi_conn.isolation_level = None  # SQLAlchemy's begin event below issues BEGIN itself
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA foreign_keys = ON")
        cur.execute("PRAGMA synchronous = FULL")
        cur.close()

    @event.listens_for(eng, "begin")
    def _begin(conn):
        # take the write lock at once: two writers queue instead of failing on a lock upgrade
        conn.exec_driver_sql("BEGIN IMMEDIATE")

    return eng


def _check_sqlite_file(path: Path) -> bool:
    """True for a new (absent or empty) file; raise for a file that is not a compquant record."""
    if not path.exists():
        return True
    if path.is_dir():
        raise RecordError("is a folder, not a record file", where=str(path), fix="give the record's file path")
    try:
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError as exc:
        raise RecordError(f"cannot read ({exc.strerror})", where=str(path),
                          fix="check the path and permissions") from exc
    if not head:
        return True
    if len(head) < 100 or head[:16] != SQLITE_MAGIC:
        raise RecordError(
            "not a compquant record: the file is not an SQLite database (damaged or another kind of file)",
            where=str(path),
            fix="restore the record from its backup or give the right --db path; the file was not changed",
        )
    app_id = int.from_bytes(head[68:72], "big")
    if app_id not in (0, SQLITE_APPLICATION_ID):
        raise RecordError(
            f"not a compquant record: an SQLite database of another program (application id {app_id:#x})",
            where=str(path),
            fix="give the path of the compquant record (--db) or a new file name",
        )
    return False


def _engine_for(location: str) -> tuple[sa.Engine, str, bool]:
    """(engine, display name, new_file) for a path or URL."""
    if is_url(location):
        try:
            url = sa.make_url(location)
        except sa.exc.ArgumentError as exc:
            raise RecordError("cannot read the database URL", where=location,
                              fix="write e.g. postgresql://user@host/dbname or a file path") from exc
        if url.drivername in ("postgresql", "postgres"):
            url = url.set(drivername="postgresql+psycopg")
        if url.drivername.startswith("sqlite"):
            path = Path(url.database or "")
            new = _check_sqlite_file(path)
            return _sqlite_engine(path), str(path), new
        if not url.drivername.startswith("postgresql"):
            raise RecordError(f"database kind {url.drivername!r} is not supported", where=_display(url),
                              fix="use an SQLite file path or a postgresql:// URL")
        try:
            eng = sa.create_engine(url, pool_pre_ping=True)
        except ImportError as exc:
            raise RecordError("the PostgreSQL driver is not installed", where=_display(url),
                              fix="pip install 'compquant[postgres]'") from exc
        return eng, _display(url), False
    path = Path(location).expanduser()
    new = _check_sqlite_file(path)
    if new:
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise RecordError(f"cannot create the folder ({exc.strerror})", where=str(path.parent),
                              fix="choose a writable --db path") from exc
    return _sqlite_engine(path), str(path), new


#: messages of the record's own triggers (append-only audit trail, certificate transitions)
_REFUSALS = ("append-only", "changes only by review", "stay in the record")


def _describe_db_error(exc: Exception) -> str:
    msg = str(getattr(exc, "orig", exc)).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return msg


class Record:
    """An open record: an engine plus the transaction and audit helpers every module uses."""

    def __init__(self, engine: sa.Engine, where: str):
        self.engine = engine
        self.where = where

    @property
    def dialect(self) -> str:
        return self.engine.dialect.name

    @contextlib.contextmanager
    def transaction(self) -> Iterator[sa.Connection]:
        """One transaction: committed as a whole at the end, rolled back as a whole on any error."""
        try:
            with self.engine.begin() as conn:
                if self.dialect == "postgresql":
                    conn.exec_driver_sql("SET LOCAL lock_timeout = '120s'")
                yield conn
        except sa.exc.OperationalError as exc:
            text = _describe_db_error(exc)
            if "locked" in text or "lock timeout" in text or "busy" in text:
                raise RecordError("the record stayed busy (another writer) for two minutes", where=self.where,
                                  fix="try again; nothing was stored") from exc
            raise RecordError(f"database error: {text}", where=self.where,
                              fix="check the record (damaged file or unreachable server); nothing was stored") from exc
        except sa.exc.DatabaseError as exc:
            text = _describe_db_error(exc)
            if any(k in text for k in _REFUSALS):
                raise RecordError(f"refused by the record: {text}", where=self.where,
                                  fix="records are only added to; nothing was changed") from exc
            raise RecordError(f"database error: {_describe_db_error(exc)}", where=self.where,
                              fix="the record may be damaged: restore it from its backup; nothing was stored") from exc

    def audit(self, conn: sa.Connection, action: str, subject: str, why: str = "", *, who: str | None = None,
              detail: dict | None = None, at: str | None = None) -> None:
        """Append one entry to the audit trail (inside the caller's transaction)."""
        conn.execute(S.audit.insert(), [self.audit_row(action, subject, why, who=who, detail=detail, at=at)])

    @staticmethod
    def audit_row(action: str, subject: str, why: str = "", *, who: str | None = None, detail: dict | None = None,
                  at: str | None = None) -> dict:
        """One audit-trail row, for appending many in one statement."""
        return dict(at=at or now_utc(), who=who or current_user(), action=action, subject=subject, why=why or "",
                    detail=json.dumps(detail or {}, sort_keys=True, ensure_ascii=False))

    def dispose(self) -> None:
        self.engine.dispose()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.dispose()


def _alembic_config(conn: sa.Connection):
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    cfg.attributes["connection"] = conn
    return cfg


def _known_revisions(cfg) -> tuple[set[str], str]:
    from alembic.script import ScriptDirectory

    sd = ScriptDirectory.from_config(cfg)
    return {s.revision for s in sd.walk_revisions()}, sd.get_current_head()


def _prepare(rec: Record) -> None:
    """Check what the database is, create or upgrade its schema; all in one transaction."""
    from alembic import command
    from alembic.migration import MigrationContext

    with rec.transaction() as conn:
        if rec.dialect == "postgresql":
            conn.exec_driver_sql("SELECT pg_advisory_xact_lock(4367821906)")  # one migrator at a time
        tables = set(sa.inspect(conn).get_table_names())
        if tables and "record_info" not in tables:
            raise RecordError("not a compquant record: the database holds other tables", where=rec.where,
                              fix="give the compquant record (--db) or an empty database")
        if "record_info" in tables:
            app = conn.execute(sa.select(S.record_info.c.value).where(S.record_info.c.key == "application")).scalar()
            if app != APPLICATION:
                raise RecordError("not a compquant record (record_info names another application)", where=rec.where,
                                  fix="give the compquant record (--db)")
        cfg = _alembic_config(conn)
        known, head = _known_revisions(cfg)
        current = MigrationContext.configure(conn).get_current_revision()
        if current is not None and current not in known:
            raise RecordError(f"the record's schema (revision {current}) is newer than this compquant knows",
                              where=rec.where, fix="update compquant; the record was not changed")
        if current == head:
            return
        command.upgrade(cfg, "head")
        if rec.dialect == "sqlite":
            conn.exec_driver_sql(f"PRAGMA application_id = {SQLITE_APPLICATION_ID}")
        if current is None:
            conn.execute(S.record_info.insert(), [
                {"key": "application", "value": APPLICATION},
                {"key": "created_at", "value": now_utc()},
                {"key": "created_by", "value": current_user()},
            ])
            rec.audit(conn, "create", "record", "first use", detail={"schema": head})
        else:
            rec.audit(conn, "upgrade", "record", "schema upgraded", detail={"from": current, "to": head})


def open_record(db=None) -> Record:
    """Open (and on first use create) the record at ``db`` (path or URL; see the module docstring)."""
    location = resolve(db)
    engine, where, _new = _engine_for(location)
    rec = Record(engine, where)
    try:
        _prepare(rec)
    except BaseException:
        engine.dispose()
        raise
    return rec


def schema_revision(rec: Record) -> str | None:
    from alembic.migration import MigrationContext

    with rec.engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


__all__ = ["DB_ENV", "USER_ENV", "Record", "RecordError", "open_record", "resolve", "configured",
           "default_location", "current_user", "now_utc", "schema_revision"]
