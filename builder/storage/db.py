"""Opening a database: engines, the schema version check, the stored parameters.

SQLite is opened in WAL mode with foreign keys on; PostgreSQL through psycopg 3.
JSON columns are written with sorted keys and no spaces so that the stored
text is the same whatever the backend or the order of insertion.
"""

from __future__ import annotations

import json
from dataclasses import asdict
from functools import partial
from pathlib import Path

from sqlalchemy import Engine, create_engine, event, inspect, select
from sqlalchemy.engine import make_url
from sqlalchemy.exc import OperationalError, SQLAlchemyError

from builder.forms.record import Params
from builder.pipeline.errors import BadInput, StorageError
from builder.storage.models import SCHEMA_VERSION, TABLES, Base, Meta

json_dumps = partial(json.dumps, sort_keys=True, separators=(",", ":"))


def sqlite_path(url: str) -> Path | None:
    u = make_url(url)
    if u.get_backend_name() != "sqlite":
        return None
    if not u.database or u.database == ":memory:":
        return None
    return Path(u.database)


def make_engine(url: str) -> Engine:
    u = make_url(url)
    if u.get_backend_name() == "sqlite":
        engine = create_engine(url, json_serializer=json_dumps, connect_args={"timeout": 60})

        @event.listens_for(engine, "connect")
        def _pragmas(dbapi_conn, _record):  # pragma: no cover - trivial
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.close()

        return engine
    return create_engine(url, json_serializer=json_dumps, pool_pre_ping=True)


def database_exists(url: str) -> bool:
    """Whether the target already holds something (a file / any of our tables)."""
    path = sqlite_path(url)
    if path is not None:
        return path.exists() and path.stat().st_size > 0
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            names = set(inspect(conn).get_table_names())
    except OperationalError as e:
        raise BadInput(redact(url), None, f"cannot connect to the database: {_short(e)}") from None
    finally:
        engine.dispose()
    return bool(names & set(TABLES))


def redact(url: str) -> str:
    path = sqlite_path(url)
    if path is not None:
        return str(path)
    return make_url(url).render_as_string(hide_password=True)


def _short(e: Exception) -> str:
    orig = getattr(e, "orig", None)
    return str(orig if orig is not None else e).strip().splitlines()[0]


def read_meta(engine: Engine) -> dict[str, str]:
    with engine.connect() as conn:
        names = set(inspect(conn).get_table_names())
        if "meta" not in names:
            return {}
        return {m.key: m.value for m in conn.execute(select(Meta.__table__)).all()}


def check_schema(engine: Engine, where: str) -> dict[str, str]:
    """Refuse a database of another schema version (or not ours); return its meta."""
    with engine.connect() as conn:
        names = set(inspect(conn).get_table_names())
    if not names:
        return {}
    meta = read_meta(engine)
    version = meta.get("schema_version")
    if version is None:
        raise BadInput(
            where,
            None,
            "this database was not written by nfb (no meta table with a schema version); "
            "point --out/--db at a new location",
        )
    if int(version) != SCHEMA_VERSION:
        newer = int(version) > SCHEMA_VERSION
        what = (
            "upgrade nfb to the version that wrote it"
            if newer
            else "read or export it with the nfb version that wrote it (see its runs table), "
            "or rebuild it with this version into a new --out/--db"
        )
        raise BadInput(
            where,
            None,
            f"database schema version {version}, but this nfb reads and writes version "
            f"{SCHEMA_VERSION}: {what}",
        )
    missing = set(TABLES) - names
    if missing:
        raise BadInput(
            where, None, f"database is incomplete (missing tables {sorted(missing)}); use a new one"
        )
    return meta


def stored_params(meta: dict[str, str]) -> Params | None:
    raw = meta.get("params")
    return None if raw is None else Params(**json.loads(raw))


def init_schema(engine: Engine, params: Params) -> None:
    """Create the tables (if missing) and the meta rows, in one transaction."""
    try:
        with engine.begin() as conn:
            Base.metadata.create_all(conn)
            existing = {m.key for m in conn.execute(select(Meta.__table__.c.key)).all()}
            rows = []
            if "schema_version" not in existing:
                rows.append({"key": "schema_version", "value": str(SCHEMA_VERSION)})
            if "params" not in existing:
                rows.append({"key": "params", "value": json_dumps(asdict(params))})
            if rows:
                conn.execute(Meta.__table__.insert(), rows)
    except (OSError, SQLAlchemyError) as e:
        raise StorageError(f"cannot create the database tables: {_short(e)}") from e


def set_params(engine: Engine, params: Params) -> None:
    with engine.begin() as conn:
        conn.execute(
            Meta.__table__.update()
            .where(Meta.__table__.c.key == "params")
            .values(value=json_dumps(asdict(params)))
        )


def open_existing(url: str) -> tuple[Engine, dict[str, str]]:
    """For status / export / show: a database that must exist, of our version."""
    where = redact(url)
    if not database_exists(url):
        raise BadInput(where, None, "no nfb database here (run `nfb run` first, or pass --db)")
    engine = make_engine(url)
    meta = check_schema(engine, where)
    return engine, meta
