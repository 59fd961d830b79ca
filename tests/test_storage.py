"""Storage on SQLite and on a real PostgreSQL server: the same tests, the same tables.

The PostgreSQL server is a throwaway one started from the Debian binaries
(tests/nfb_services.py); without them these tests are skipped visibly, or fail
under NFB_REQUIRE_SERVICES=1 (.ci/run).
"""

from __future__ import annotations

import errno
from dataclasses import replace

import pytest
from sqlalchemy import func, select, text, update

from builder.forms.record import Params, compute_unit
from builder.pipeline.errors import BadInput, StorageError
from builder.pipeline.jobs import load_job
from builder.pipeline.run import run_job
from builder.storage.db import check_schema, init_schema, make_engine, open_existing
from builder.storage.models import SCHEMA_VERSION, Meta, Newform, Space
from builder.storage.parquet import export
from builder.storage.reader import load_newform, load_space, unit_states
from builder.storage.writer import Writer
from tests.nfb_helpers import SMALL, parquet_bytes, snapshot
from tests.nfb_services import pg_server, pg_url  # noqa: F401  (fixtures)

PARAMS = Params(trace_bound=40, ap_bound=20, dim_cap=6)
UNITS = [(11, 2), (23, 2), (37, 2), (30, 2), (11, 4), (13, 4), (1, 2), (2, 4)]


@pytest.fixture(scope="module")
def records():
    return [compute_unit(N, k, PARAMS) for N, k in UNITS]


@pytest.fixture(params=["sqlite", "postgresql"])
def db_url(request, tmp_path):
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'newforms.sqlite'}"
    return request.getfixturevalue("pg_url")


def fresh(url):
    engine = make_engine(url)
    init_schema(engine, PARAMS)
    return engine


def count(engine, table):
    with engine.connect() as conn:
        return conn.execute(select(func.count()).select_from(table)).scalar()


def test_round_trip_preserves_content_hash(db_url, records):
    engine = fresh(db_url)
    w = Writer(engine)
    for rec in records:
        w.commit(rec)
    for rec in records:
        back = load_space(engine, rec.level, rec.weight)
        assert back is not None
        assert back.content_hash() == rec.content_hash()
        assert back.to_dict() == rec.to_dict()
    states = unit_states(engine)
    assert {u[:2] for u in states} == set(UNITS)
    assert all(s.status == "done" for s in states.values())
    n = sum(len(r.newforms) for r in records)
    assert count(engine, Newform.__table__) == n
    engine.dispose()


def test_recommit_replaces_without_duplicates(db_url, records):
    engine = fresh(db_url)
    w = Writer(engine)
    for rec in records:
        w.commit(rec)
    before = snapshot(db_url)
    for rec in records[:3]:
        w.commit(rec)  # e.g. a unit redone after a kill that landed after its commit
    assert snapshot(db_url) == before
    engine.dispose()


def test_failed_commit_rolls_back_everything(db_url, records, monkeypatch):
    engine = fresh(db_url)
    w = Writer(engine)
    w.commit(records[0])
    before = snapshot(db_url)
    target = records[2]
    monkeypatch.setenv("NFB_TEST_COMMIT_FAIL", f"{target.level},{target.weight},ENOSPC")
    w2 = Writer(engine)
    with pytest.raises(StorageError, match="disk is full.*intact"):
        w2.commit(target)
    assert snapshot(db_url) == before  # no space row, no newform, no eigenvalue of the unit
    monkeypatch.delenv("NFB_TEST_COMMIT_FAIL")
    Writer(engine).commit(target)
    assert load_space(engine, target.level, target.weight).content_hash() == target.content_hash()
    engine.dispose()


def test_failure_rows_and_retry(db_url, records):
    engine = fresh(db_url)
    w = Writer(engine)
    from dataclasses import asdict

    w.commit_failure((37, 2, 0), asdict(PARAMS), "Traceback: boom", 0.5)
    st = unit_states(engine)[(37, 2, 0)]
    assert st.status == "failed" and st.content_hash is None
    rec = next(r for r in records if (r.level, r.weight) == (37, 2))
    w.commit(rec)
    assert unit_states(engine)[(37, 2, 0)].status == "done"
    # a later failure does not destroy data that is stored
    w.commit_failure((37, 2, 0), asdict(PARAMS), "again", 0.1)
    assert unit_states(engine)[(37, 2, 0)].status == "done"
    engine.dispose()


def test_show_reads_one_newform(db_url, records):
    engine = fresh(db_url)
    Writer(engine).commit(records[2])  # 37w2
    found = load_newform(engine, "37w2-1")
    assert found is not None
    nf, space, eigen = found
    assert nf["level"] == 37 and nf["traces"][0] == nf["dim"]
    assert space["level"] == 37 and space["status"] == "done"
    assert [e["p"] for e in eigen] == sorted(e["p"] for e in eigen)
    assert load_newform(engine, "37w2-99") is None
    engine.dispose()


def test_schema_version_refused(db_url):
    engine = fresh(db_url)
    with engine.begin() as conn:
        conn.execute(
            update(Meta.__table__)
            .where(Meta.__table__.c.key == "schema_version")
            .values(value="99")
        )
    with pytest.raises(BadInput) as e:
        check_schema(engine, "thedb")
    msg = str(e.value)
    assert "schema version 99" in msg and f"version {SCHEMA_VERSION}" in msg
    assert "upgrade nfb" in msg
    with engine.begin() as conn:
        conn.execute(
            update(Meta.__table__).where(Meta.__table__.c.key == "schema_version").values(value="0")
        )
    with pytest.raises(BadInput, match="nfb version that wrote it"):
        open_existing(db_url)
    engine.dispose()


def test_foreign_database_refused(db_url):
    engine = make_engine(db_url)
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE something_else (x integer)"))
    with pytest.raises(BadInput, match="not written by nfb"):
        check_schema(engine, "thedb")
    engine.dispose()


def test_sqlite_and_postgresql_export_identical(tmp_path, records, pg_url):  # noqa: F811
    urls = {"sqlite": f"sqlite:///{tmp_path / 'a.sqlite'}", "postgresql": pg_url}
    outs = {}
    for name, url in urls.items():
        engine = fresh(url)
        w = Writer(engine)
        order = records if name == "sqlite" else list(reversed(records))
        for rec in order:
            w.commit(rec)
        export(engine, tmp_path / name)
        outs[name] = parquet_bytes(tmp_path / name)
        engine.dispose()
    assert outs["sqlite"] == outs["postgresql"]


def test_run_job_on_postgresql_matches_sqlite(tmp_path, pg_url):  # noqa: F811
    small = {**SMALL, "levels": "1-16"}
    a = load_job(None, {**small, "out": str(tmp_path / "lite")})
    b = load_job(None, {**small, "out": str(tmp_path / "pg"), "db": pg_url})
    run_job(a, progress="none")
    run_job(b, progress="none")
    sa, sb = snapshot(a.db_url), snapshot(b.db_url)
    assert sa == sb
    for job in (a, b):
        engine = make_engine(job.db_url)
        export(engine, job.out / "notimes", timings=False)
        engine.dispose()
    assert parquet_bytes(tmp_path / "lite" / "notimes") == parquet_bytes(
        tmp_path / "pg" / "notimes"
    )
    assert (
        parquet_bytes(tmp_path / "lite" / "parquet")["newforms"]
        == parquet_bytes(tmp_path / "pg" / "parquet")["newforms"]
    )
    # a PostgreSQL db made with other bounds is refused unless extending
    c = load_job(None, {**small, "trace_bound": 60, "out": str(tmp_path / "pg2"), "db": pg_url})
    with pytest.raises(BadInput, match="--extend"):
        run_job(c, progress="none")


def test_bigger_params_in_space_rows(db_url, records):
    engine = fresh(db_url)
    rec = records[0]
    w = Writer(engine)
    w.commit(rec)
    bigger = replace(rec, params={**rec.params, "trace_bound": 99})
    w.commit(bigger)
    with engine.connect() as conn:
        tb = conn.execute(select(Space.__table__.c.trace_bound)).scalars().all()
    assert tb == [99]
    engine.dispose()


def test_disk_full_error_is_clear_on_oserror(db_url, records, monkeypatch):
    engine = fresh(db_url)
    w = Writer(engine)

    def boom(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(w, "_delete_unit", boom)
    with pytest.raises(StorageError, match="disk is full"):
        w.commit(records[0])
    assert count(engine, Space.__table__) == 0
    engine.dispose()


# ----------------------------------------------------------------------------- characters

# (N, k, char_index): 13w2c4 (order 6, Q(χ) = Q(ζ_3)), 16w3c1 and 7w3c1 (odd quadratic
# characters in odd weight, CM forms), 11w2c1 (odd character in even weight: the zero
# space), 13w4c2 (order 3, two orbits) next to the trivial 13w4.
CHAR_UNITS = [(13, 2, 4), (16, 3, 1), (7, 3, 1), (11, 2, 1), (13, 4, 2), (13, 4, 0)]


@pytest.fixture(scope="module")
def char_records():
    return [compute_unit(N, k, PARAMS, char_index=c) for N, k, c in CHAR_UNITS]


def test_character_round_trip(db_url, char_records):
    from builder.characters import character_orbit

    engine = fresh(db_url)
    w = Writer(engine)
    for rec in char_records:
        w.commit(rec)
    for rec in char_records:
        back = load_space(engine, rec.level, rec.weight, rec.char_index)
        assert back is not None
        assert back.to_dict() == rec.to_dict()
        assert back.content_hash() == rec.content_hash()
    assert set(unit_states(engine)) == set(CHAR_UNITS)
    S, N = Space.__table__, Newform.__table__
    with engine.connect() as conn:
        spaces = {
            (r.level, r.weight, r.char_index): r for r in conn.execute(select(S)).mappings()
        }
        forms = {r.label: r for r in conn.execute(select(N)).mappings()}
    for N_, k, c in CHAR_UNITS:
        chi = character_orbit(N_, c)
        row = spaces[(N_, k, c)]
        assert (row.char_order, row.char_conductor, row.char_parity, row.char_number,
                row.char_degree) == (chi.order, chi.conductor, chi.parity, chi.number,
                                     chi.degree)  # fmt: skip
    # the record contract (builder/forms/record.py): orbit dims are absolute, space dims are
    # over Q(χ), so Σ dim = char_degree · dim_new and Σ rel_dim = dim_new
    for rec in char_records:
        dims = [forms[f.label].dim for f in rec.newforms]
        rel = [forms[f.label].rel_dim for f in rec.newforms]
        assert sum(dims) == rec.char_degree * rec.dim_new and sum(rel) == rec.dim_new
    nontrivial = [f for f in forms.values() if f.char_index != 0]
    assert nontrivial and all(f.char_order > 1 for f in nontrivial)
    assert all(f.fricke_sign is None and f.root_number is None for f in nontrivial)
    assert all(f.al_primes == [] and f.al_pattern == "" for f in nontrivial)
    assert forms["13w2c4-1"].dim == 2 and forms["13w2c4-1"].rel_dim == 1
    assert all(f.fricke_sign in (1, -1) for f in forms.values() if f.char_index == 0)
    found = load_newform(engine, "13w2c4-1")
    assert found is not None and found[1]["char_order"] == 6 and found[0]["char_order"] == 6
    engine.dispose()


def test_character_units_are_separate(db_url, char_records):
    """Recommitting 13w4c2 leaves the trivial 13w4 alone (the unit key has char_index)."""
    engine = fresh(db_url)
    w = Writer(engine)
    for rec in char_records:
        w.commit(rec)
    before = snapshot(db_url)
    c2 = next(r for r in char_records if (r.level, r.weight, r.char_index) == (13, 4, 2))
    w.commit(c2)
    assert snapshot(db_url) == before
    assert load_space(engine, 13, 4, 0).char_order == 1
    engine.dispose()


def test_character_failure_row(db_url, char_records):
    from dataclasses import asdict

    engine = fresh(db_url)
    w = Writer(engine)
    w.commit_failure((13, 2, 4), asdict(PARAMS), "Traceback: boom", 0.5)
    with engine.connect() as conn:
        row = conn.execute(select(Space.__table__)).mappings().one()
    assert row["status"] == "failed"
    # χ of index 4 mod 13: order 6, conductor 13, even (builder/characters.py)
    assert (row["char_order"], row["char_conductor"], row["char_parity"],
            row["char_degree"]) == (6, 13, 1, 2)  # fmt: skip
    w.commit(next(r for r in char_records if (r.level, r.weight, r.char_index) == (13, 2, 4)))
    assert unit_states(engine)[(13, 2, 4)].status == "done"
    engine.dispose()
