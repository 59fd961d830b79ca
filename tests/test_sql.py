"""`nfb sql`: the right rows on a small real table, and no way to write through it.

SQLite (mode=ro + query_only + authorizer), the Parquet export through DuckDB
(read-only scratch copy, external access off), and PostgreSQL (a READ ONLY
transaction) on a real server started here (tests/nfb_services.py; skipped with a
reason without the binaries, a failure with NFB_REQUIRE_SERVICES=1).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest

from builder.tables.find import Filters, find
from builder.tables.source import open_source
from builder.tables.sql import ReadOnlyViolation, run_sql
from tests.nfb_helpers import run_nfb
from tests.nfb_services import pg_server, pg_url  # noqa: F401 - fixtures
from tests.tables_helpers import (
    char_table,
    copy_database,
    copy_table,
    read_export,
    small_table,
)

# statements that would write, each must be refused
WRITES = [
    "INSERT INTO meta VALUES ('evil', '1')",
    "UPDATE newforms SET dim = 0",
    "DELETE FROM eigenvalues",
    "DROP TABLE newforms",
    "CREATE TABLE evil (x INTEGER)",
    "CREATE TEMP TABLE evil (x INTEGER)",
    "ALTER TABLE newforms ADD COLUMN evil INTEGER",
    "WITH a AS (SELECT 1) DELETE FROM newforms",
    "SELECT 1; DELETE FROM newforms",
    "SELECT 1; COMMIT; DROP TABLE spaces",
    "REPLACE INTO meta VALUES ('schema_version', '99')",
]
SQLITE_WRITES = WRITES + [
    "ATTACH DATABASE '{tmp}/attached.sqlite' AS other",
    "VACUUM INTO '{tmp}/copy.sqlite'",
    "VACUUM",
    "PRAGMA user_version = 7",
    "PRAGMA journal_mode = DELETE",
    "PRAGMA query_only = OFF",
    "REINDEX",
    "ANALYZE",
    "BEGIN IMMEDIATE",
    "SELECT load_extension('/tmp/evil')",
]
DUCKDB_WRITES = WRITES + [
    "COPY newforms TO '{tmp}/out.csv'",
    "COPY (SELECT 1) TO '{tmp}/out.parquet' (FORMAT parquet)",
    "ATTACH '{tmp}/other.duckdb' AS other",
    "SELECT * FROM read_csv('/etc/hostname')",
    "INSTALL httpfs",
    "SET enable_external_access = true",
    "WITH a AS (SELECT 1) INSERT INTO spaces SELECT * FROM spaces",
]


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    return small_table(tmp_path_factory)


def _digest(path: Path) -> dict[str, str]:
    return {
        str(p.relative_to(path)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(path.rglob("*"))
        if p.is_file() and not p.name.endswith(("-shm", "-wal"))
    }


def test_select_matches_pandas(table):
    sp, nf, _ = read_export(table)
    with open_source(table) as src:
        df = run_sql(
            src,
            "SELECT weight, fricke_sign, count(*) AS orbits, sum(dim) AS forms FROM newforms "
            "GROUP BY weight, fricke_sign ORDER BY 1, 2",
        )
        want = nf.groupby(["weight", "fricke_sign"]).agg(
            orbits=("dim", "size"), forms=("dim", "sum")
        )
        assert [tuple(r) for r in df.itertuples(index=False)] == [
            (k, s, o, f) for (k, s), (o, f) in want.iterrows()
        ]
        df = run_sql(
            src,
            "SELECT label FROM newforms WHERE weight = 2 AND al_pattern LIKE '%2-%' "
            "AND json_extract(traces, '$[2]') BETWEEN -2 AND 2 ORDER BY level, orbit;",
        )
        mask = (nf.weight == 2) & nf.al_pattern.str.contains("2-", regex=False)
        mask &= np.array([-2 <= t[2] <= 2 for t in nf.traces])
        assert df["label"].tolist() == nf[mask].sort_values(["level", "orbit"])["label"].tolist()
        df = run_sql(src, "PRAGMA table_info(spaces)")
        assert "dim_new" in df["name"].tolist()
        df = run_sql(src, "SELECT count(*) AS n FROM spaces WHERE weight = 4 AND dim_new > 0")
        assert df["n"].iloc[0] == int(((sp.weight == 4) & (sp.dim_new > 0)).sum())
        # a ';' or a keyword inside a string is not a second statement
        assert run_sql(src, "SELECT 'a; DROP TABLE x' AS s")["s"].iloc[0] == "a; DROP TABLE x"


@pytest.mark.parametrize("stmt", SQLITE_WRITES)
def test_sqlite_writes_refused_db_unchanged(table, tmp_path, stmt):
    t = copy_table(table, tmp_path / "t")
    before = _digest(t)
    stmt = stmt.format(tmp=tmp_path)
    with open_source(t) as src:
        with pytest.raises(ReadOnlyViolation, match="refused"):
            run_sql(src, stmt)
        assert run_sql(src, "SELECT count(*) AS n FROM newforms")["n"].iloc[0] > 0
    assert _digest(t) == before
    assert not (tmp_path / "attached.sqlite").exists()
    assert not (tmp_path / "copy.sqlite").exists()


def test_cli_sql_refuses_and_reads(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    before = _digest(t)
    for stmt in ("DELETE FROM newforms", "DROP TABLE spaces", "PRAGMA user_version = 3",
                 f"ATTACH DATABASE '{tmp_path}/x.sqlite' AS x"):  # fmt: skip
        r = run_nfb("sql", "--out", t, stmt)
        assert r.returncode == 2, (stmt, r.stdout, r.stderr)
        assert "refused" in r.stderr and "read-only" in r.stderr
    assert _digest(t) == before
    assert not (tmp_path / "x.sqlite").exists()
    r = run_nfb("sql", "--out", t, "SELECT label, dim FROM newforms WHERE level = 37 ORDER BY 1",
                "--format", "csv")  # fmt: skip
    assert r.returncode == 0, r.stderr
    assert r.stdout.splitlines()[0] == "label,dim"
    _, nf, _ = read_export(t)
    want = nf[nf.level == 37].sort_values("label")
    assert r.stdout.splitlines()[1:] == [
        f"{a},{b}" for a, b in zip(want.label, want.dim, strict=True)
    ]


def _need_duckdb():
    return pytest.importorskip("duckdb", reason="duckdb not installed: pip install 'nfb[search]'")


def test_duckdb_select_matches_pandas(table):
    _need_duckdb()
    _, nf, _ = read_export(table)
    with open_source(parquet=table / "parquet") as src:
        df = run_sql(
            src,
            "SELECT label FROM newforms WHERE list_contains(al_primes, 5) AND weight = 4 "
            "ORDER BY level, orbit",
        )
    want = nf[(nf.weight == 4) & np.array([5 in list(p) for p in nf.al_primes])]
    assert df["label"].tolist() == want.sort_values(["level", "orbit"])["label"].tolist()


@pytest.mark.parametrize("stmt", DUCKDB_WRITES)
def test_duckdb_writes_refused_files_unchanged(table, tmp_path, stmt):
    _need_duckdb()
    t = copy_table(table, tmp_path / "t")
    before = _digest(t / "parquet")
    with open_source(parquet=t / "parquet") as src:
        with pytest.raises(ReadOnlyViolation, match="refused"):
            run_sql(src, stmt.format(tmp=tmp_path))
    assert _digest(t / "parquet") == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t"]


# ----------------------------------------------------------------------------- PostgreSQL


@pytest.fixture
def pg_table(table, pg_url):  # noqa: F811 - the fixture imported above
    copy_database(f"sqlite:///{(table / 'newforms.sqlite').resolve()}", pg_url)
    return pg_url


def _pg_counts(url: str) -> dict[str, int]:
    from sqlalchemy import func, select

    from builder.storage.db import make_engine
    from builder.storage.models import Base

    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            return {
                name: conn.execute(
                    select(func.count()).select_from(Base.metadata.tables[name])
                ).scalar()
                for name in ("meta", "runs", "spaces", "newforms", "eigenvalues")
            }
    finally:
        engine.dispose()


def test_postgresql_find_sql_and_writes_refused(table, pg_table):
    before = _pg_counts(pg_table)
    with open_source(db=pg_table) as pg, open_source(table) as lite:
        for filters in (
            dict(level=(10, 30), al={2: -1}),
            dict(weight=4, trace={3: (-5, 5)}, rational=False),
            dict(ap={2: 0}),
            dict(ap={3: (-2, 2)}, dim=(2, None)),
            dict(disc=(5, 100), lzero=False),
        ):
            f = Filters.from_kwargs(**filters)
            assert find(pg, f)["label"].tolist() == find(lite, f)["label"].tolist(), filters
        q = "SELECT label FROM newforms WHERE al_pattern LIKE '%3+%' ORDER BY label"
        assert run_sql(pg, q)["label"].tolist() == run_sql(lite, q)["label"].tolist()
        for stmt in WRITES + [
            "WITH a AS (DELETE FROM newforms RETURNING 1) SELECT count(*) FROM a",
            "SELECT nextval('runs_id_seq')",
            "EXPLAIN ANALYZE DELETE FROM newforms",
            "SET default_transaction_read_only = off",
            "SELECT set_config('transaction_read_only', 'off', false), count(*) FROM spaces",
        ]:
            with pytest.raises(Exception) as exc:  # ReadOnlyViolation or a refused SQL error
                run_sql(pg, stmt)
            assert (
                "refused" in str(exc.value)
                or "read-only" in str(exc.value)
                or "read-write" in (str(exc.value))
            ), (stmt, exc.value)
    assert _pg_counts(pg_table) == before
    r = run_nfb("sql", "--db", pg_table, "DELETE FROM newforms")
    assert r.returncode == 2 and "refused" in r.stderr
    assert _pg_counts(pg_table) == before


# ----------------------------------------------------------------------------- characters


@pytest.fixture(scope="module")
def char_tab(tmp_path_factory):
    return char_table(tmp_path_factory)


CHAR_QUERIES = [
    # newforms per character order; NULL Fricke signs exactly for the nontrivial ones
    "SELECT char_order, count(*) AS orbits, sum(dim) AS forms, sum(rel_dim) AS rel, "
    "sum(CASE WHEN fricke_sign IS NULL THEN 1 ELSE 0 END) AS no_fricke "
    "FROM newforms GROUP BY char_order ORDER BY char_order",
    # the join with the unit's character
    "SELECT n.label, s.char_conductor, s.char_parity, s.char_degree FROM newforms n "
    "JOIN spaces s ON s.level = n.level AND s.weight = n.weight AND s.char_index = n.char_index "
    "WHERE s.char_parity = -1 ORDER BY n.label",
]


def _char_reference(char_tab):
    sp, nf, _ = read_export(char_tab)
    g = nf.groupby("char_order")
    first = [
        (int(m), int(len(f)), int(f.dim.sum()), int(f.rel_dim.sum()),
         int(f.fricke_sign.isna().sum()))  # fmt: skip
        for m, f in g
    ]
    m = nf.merge(sp, on=["level", "weight", "char_index"], suffixes=("", "_s"))
    m = m[m.char_parity == -1].sort_values("label")
    second = [
        (r.label, int(r.char_conductor), int(r.char_parity), int(r.char_degree))
        for r in m.itertuples()
    ]
    return first, second


def test_sql_character_columns(char_tab):
    first, second = _char_reference(char_tab)
    assert first[0][4] == 0 and all(row[4] == row[1] for row in first[1:])  # NULL iff χ ≠ 1
    assert second
    kinds = [open_source(char_tab)]
    from builder.tables.sql import duckdb_available

    if duckdb_available():  # DuckDB is optional (nfb[search]); its own tests skip visibly
        kinds.append(open_source(parquet=char_tab / "parquet"))
    for src in kinds:
        with src:
            for q, want in zip(CHAR_QUERIES, (first, second), strict=True):
                got = [tuple(int(x) if not isinstance(x, str) else x for x in r)
                       for r in run_sql(src, q).itertuples(index=False)]  # fmt: skip
                assert got == want, (src.kind, q)


def test_postgresql_character_filters(char_tab, pg_url):  # noqa: F811 - the fixture
    copy_database(f"sqlite:///{(char_tab / 'newforms.sqlite').resolve()}", pg_url)
    first, _ = _char_reference(char_tab)
    with open_source(db=pg_url) as pg, open_source(char_tab) as lite:
        for filters in (
            dict(char_order=(3, None)),
            dict(char_conductor=13, weight=4),
            dict(char_parity=-1),
            dict(trivial_char=False, ap={2: (-3, 3)}),
            dict(fricke=-1),
        ):
            f = Filters.from_kwargs(**filters)
            assert find(pg, f)["label"].tolist() == find(lite, f)["label"].tolist(), filters
        rows = run_sql(pg, CHAR_QUERIES[0]).itertuples(index=False)
        assert [tuple(int(x) for x in r) for r in rows] == first
