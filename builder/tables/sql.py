"""Read-only SQL on a finished table: the engine behind `nfb sql` and ``Table.sql``.

It must be impossible to change anything through it. Each source gets several
independent locks, any one of which alone refuses a write:

SQLite
  1. the file is opened through a ``file:…?mode=ro`` URI — SQLite itself opens it
     read-only, so no page of the database can be written;
  2. ``PRAGMA query_only = ON`` — SQLite refuses CREATE/INSERT/UPDATE/DELETE/DROP;
  3. an authorizer callback that allows only reading: SELECT, reading columns,
     (non-blocked) functions, recursive CTEs and a short list of read-only
     PRAGMAs; it denies ATTACH/DETACH (which could create other files), VACUUM
     (``VACUUM INTO`` writes a copy), every write, transaction control and PRAGMA
     assignments;
  4. one statement only.

PostgreSQL
  1. the statement runs inside ``SET TRANSACTION READ ONLY`` and the transaction
     is always rolled back;
  2. one statement only (checked outside string literals, quoted identifiers,
     comments and dollar quotes, so ``SELECT 1; COMMIT; DROP …`` cannot escape the
     read-only transaction), and the statement must start with SELECT, WITH,
     VALUES, TABLE, SHOW or EXPLAIN (without ANALYZE).
  For a shared server, also connect as a role that has only SELECT grants.

Parquet export (needs DuckDB, ``pip install 'nfb[search]'``)
  1. the three datasets are copied into a scratch DuckDB file (tables ``spaces``,
     ``newforms``, ``eigenvalues``), which is then reopened ``read_only``, so every
     write to a table is refused; the Parquet files are only ever read;
  2. ``enable_external_access`` is switched off and the configuration locked, so
     no other file can be read or written (``COPY … TO``, ``ATTACH``, ``INSTALL``);
  3. one statement, starting with a reading keyword.

A refused statement raises ``ReadOnlyViolation`` (``nfb sql`` exits with 2).
"""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

import pandas as pd

from builder.pipeline.errors import BadInput
from builder.tables.source import Source


class ReadOnlyViolation(BadInput):
    """The statement would write (or is not a single read-only statement)."""

    def __init__(self, where: str, problem: str) -> None:
        super().__init__(where, None, f"refused: {problem} (nfb sql is read-only)")


READ_KEYWORDS = {
    "sqlite": ("select", "with", "values", "explain", "pragma"),
    "postgresql": ("select", "with", "values", "table", "show", "explain"),
    "parquet": ("select", "with", "values", "table", "show", "explain", "describe", "summarize"),
}

# PRAGMAs that only read: with an argument they name a table/index, never set a value
_PRAGMA_WITH_ARG = {
    "table_info",
    "table_xinfo",
    "index_list",
    "index_info",
    "index_xinfo",
    "foreign_key_list",
    "table_list",
}
_PRAGMA_NO_ARG = _PRAGMA_WITH_ARG | {
    "database_list",
    "compile_options",
    "user_version",
    "schema_version",
    "application_id",
    "page_count",
    "page_size",
    "freelist_count",
    "encoding",
    "journal_mode",
    "query_only",
    "foreign_keys",
    "data_version",
    "collation_list",
    "function_list",
    "module_list",
    "pragma_list",
}
_BLOCKED_FUNCTIONS = {"load_extension", "writefile", "readfile", "edit", "fts3_tokenizer"}


# ----------------------------------------------------------------------------- statement checks


def strip_sql(sql: str) -> str:
    """The statement with string literals, quoted identifiers, comments and dollar-quoted
    bodies blanked out (so that keywords and ';' are only seen where they are code)."""
    out = []
    i, n = 0, len(sql)
    while i < n:
        c = sql[i]
        if c == "-" and sql.startswith("--", i):
            j = sql.find("\n", i)
            i = n if j < 0 else j
            out.append(" ")
        elif c == "/" and sql.startswith("/*", i):
            j = sql.find("*/", i + 2)
            i = n if j < 0 else j + 2
            out.append(" ")
        elif c in "'\"`[":
            close = {"'": "'", '"': '"', "`": "`", "[": "]"}[c]
            j = i + 1
            while j < n:
                if sql[j] == close:
                    if close in "'\"" and j + 1 < n and sql[j + 1] == close:  # doubled quote
                        j += 2
                        continue
                    break
                j += 1
            i = j + 1
            out.append(" x ")
        elif c == "$":
            m = re.match(r"\$([A-Za-z_][A-Za-z_0-9]*)?\$", sql[i:])
            if m:
                tag = m.group(0)
                j = sql.find(tag, i + len(tag))
                i = n if j < 0 else j + len(tag)
                out.append(" x ")
            else:
                out.append(c)
                i += 1
        else:
            out.append(c)
            i += 1
    return "".join(out)


def check_statement(sql: str, where: str, kind: str = "sqlite") -> str:
    """One read-only-looking statement (trailing ';' allowed); returns it without the ';'."""
    code = strip_sql(sql).strip()
    body = code.rstrip().rstrip(";").rstrip()
    if not body:
        raise ReadOnlyViolation(where, "empty statement")
    if ";" in body:
        raise ReadOnlyViolation(where, "more than one statement")
    first = re.match(r"[A-Za-z]+", body.lstrip("( \t\r\n"))
    word = first.group(0).lower() if first else ""
    allowed = READ_KEYWORDS[kind]
    if word not in allowed:
        raise ReadOnlyViolation(
            where,
            f"{word.upper() or body!r} statement; allowed: "
            + ", ".join(w.upper() for w in allowed),
        )
    if word == "explain" and re.match(r"explain\s*(\(\s*)?analy[sz]e", body, re.I):
        raise ReadOnlyViolation(where, "EXPLAIN ANALYZE executes the statement")
    # cut the trailing ';' from the original text
    stripped = sql.rstrip()
    while stripped.endswith(";"):
        stripped = stripped[:-1].rstrip()
    return stripped


# ----------------------------------------------------------------------------- SQLite


def _authorizer(action, arg1, arg2, _db, _trigger):
    if action in (sqlite3.SQLITE_SELECT, sqlite3.SQLITE_READ, sqlite3.SQLITE_RECURSIVE):
        return sqlite3.SQLITE_OK
    if action == sqlite3.SQLITE_FUNCTION:
        return sqlite3.SQLITE_DENY if (arg2 or "").lower() in _BLOCKED_FUNCTIONS else 0
    if action == sqlite3.SQLITE_PRAGMA:
        name = (arg1 or "").lower()
        if arg2 is None and name in _PRAGMA_NO_ARG:
            return sqlite3.SQLITE_OK
        if arg2 is not None and name in _PRAGMA_WITH_ARG:
            return sqlite3.SQLITE_OK
        return sqlite3.SQLITE_DENY
    return sqlite3.SQLITE_DENY


def sqlite_readonly_connection(path: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(f"file:{Path(path).resolve()}?mode=ro", uri=True)
    conn.execute("PRAGMA query_only = ON")
    conn.set_authorizer(_authorizer)
    return conn


def _run_sqlite(path: Path, sql: str, where: str, limit: int | None) -> pd.DataFrame:
    conn = sqlite_readonly_connection(path)
    try:
        try:
            cur = conn.execute(sql)
        except sqlite3.DatabaseError as e:
            msg = str(e)
            if "not authorized" in msg or "authorization denied" in msg or "readonly" in msg:
                raise ReadOnlyViolation(where, msg) from None
            raise BadInput(where, None, f"SQL error: {msg}") from None
        except sqlite3.Warning as e:  # e.g. "You can only execute one statement at a time."
            raise ReadOnlyViolation(where, str(e)) from None
        cols = [d[0] for d in cur.description or []]
        rows = cur.fetchmany(limit) if limit else cur.fetchall()
        return pd.DataFrame(rows, columns=cols)
    finally:
        conn.rollback()
        conn.close()


# ----------------------------------------------------------------------------- PostgreSQL


def _run_postgres(src: Source, sql: str, where: str, limit: int | None) -> pd.DataFrame:
    raw = src.engine().raw_connection()  # a DBAPI (psycopg) connection, not autocommit
    try:
        cur = raw.cursor()
        try:
            cur.execute("SET TRANSACTION READ ONLY")
            # no parameters: psycopg sends the text as is (no %-placeholders)
            cur.execute(sql)
        except Exception as e:  # noqa: BLE001 - psycopg.Error and its subclasses
            code = getattr(e, "sqlstate", None)
            msg = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
            if code == "25006":  # read_only_sql_transaction
                raise ReadOnlyViolation(where, msg) from None
            raise BadInput(where, None, f"SQL error: {msg}") from None
        cols = [d[0] for d in cur.description or []]
        rows = (cur.fetchmany(limit) if limit else cur.fetchall()) if cols else []
        return pd.DataFrame([tuple(r) for r in rows], columns=cols)
    finally:
        try:
            raw.rollback()
        finally:
            raw.close()


# ----------------------------------------------------------------------------- Parquet via DuckDB


def duckdb_available() -> bool:
    try:
        import duckdb  # noqa: F401
    except ImportError:
        return False
    return True


def _duckdb():
    try:
        import duckdb
    except ImportError:
        raise BadInput(
            "command line", None, "SQL on a Parquet export needs DuckDB: pip install 'nfb[search]'"
        ) from None
    return duckdb


def _parquet_glob(root: Path, name: str) -> str:
    return str((Path(root) / name / "*.parquet").resolve()).replace("'", "''")


def duckdb_views(root: Path):
    """An in-memory DuckDB with views spaces/newforms/eigenvalues on the export (for the API)."""
    con = _duckdb().connect(":memory:")
    for name in ("spaces", "newforms", "eigenvalues"):
        con.execute(
            f"CREATE VIEW {name} AS SELECT * FROM read_parquet('{_parquet_glob(root, name)}')"
        )
    return con


def _run_duckdb(src: Source, sql: str, where: str, limit: int | None) -> pd.DataFrame:
    """Copy the export into a scratch DuckDB file, reopen it read-only, lock it down, query."""
    import tempfile

    duckdb = _duckdb()
    with tempfile.TemporaryDirectory(prefix="nfb-sql-") as tmp:
        path = str(Path(tmp) / "table.duckdb")
        con = duckdb.connect(path)
        try:
            for name in ("spaces", "newforms", "eigenvalues"):
                con.execute(
                    f"CREATE TABLE {name} AS SELECT * FROM "
                    f"read_parquet('{_parquet_glob(src.path, name)}')"
                )
        finally:
            con.close()
        con = duckdb.connect(path, read_only=True)
        try:
            con.execute("SET enable_external_access = false")
            con.execute("SET lock_configuration = true")
            try:
                cur = con.execute(sql)
            except duckdb.Error as e:
                msg = str(e).strip().splitlines()[0]
                low = msg.lower()
                if "read-only" in low or "external access" in low or "permission" in low:
                    raise ReadOnlyViolation(where, msg) from None
                raise BadInput(where, None, f"SQL error: {msg}") from None
            cols = [d[0] for d in cur.description or []]
            rows = cur.fetchmany(limit) if limit else cur.fetchall()
            return pd.DataFrame(rows, columns=cols)
        finally:
            con.close()


# ----------------------------------------------------------------------------- entry point


def run_sql(src: Source, sql: str, limit: int | None = None) -> pd.DataFrame:
    """Run one read-only statement on the source; the rows as a DataFrame."""
    where = src.where
    stmt = check_statement(sql, where, src.kind)
    if src.kind == "sqlite":
        return _run_sqlite(src.path, stmt, where, limit)
    if src.kind == "postgresql":
        return _run_postgres(src, stmt, where, limit)
    return _run_duckdb(src, stmt, where, limit)
