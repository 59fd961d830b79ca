"""Deterministic Parquet export (builder/storage/parquet.py)."""

from __future__ import annotations

import errno
import random
from dataclasses import replace

import pandas as pd
import pyarrow.parquet as pq
import pytest

from builder.forms.record import Params, compute_unit
from builder.pipeline.errors import StorageError
from builder.storage import parquet as pqmod
from builder.storage.db import init_schema, make_engine
from builder.storage.parquet import SCHEMAS, export
from builder.storage.writer import Writer
from tests.nfb_helpers import parquet_bytes

PARAMS = Params(trace_bound=40, ap_bound=20, dim_cap=6)
UNITS = [(N, k) for k in (2, 4) for N in (1, 11, 14, 23, 30, 33, 37, 43)]


@pytest.fixture(scope="module")
def records():
    return [compute_unit(N, k, PARAMS) for N, k in UNITS]


def build(tmp_path, name, records, order_seed=None):
    engine = make_engine(f"sqlite:///{tmp_path / (name + '.sqlite')}")
    init_schema(engine, PARAMS)
    recs = list(records)
    if order_seed is not None:
        random.Random(order_seed).shuffle(recs)
    w = Writer(engine)
    for r in recs:
        w.commit(r)
    return engine


def test_same_bytes_whatever_the_insertion_order(tmp_path, records):
    e1 = build(tmp_path, "a", records)
    e2 = build(tmp_path, "b", records, order_seed=7)
    export(e1, tmp_path / "pa")
    export(e2, tmp_path / "pb")
    export(e1, tmp_path / "pa2")
    a, b, a2 = (parquet_bytes(tmp_path / d) for d in ("pa", "pb", "pa2"))
    assert a == b == a2
    e1.dispose()
    e2.dispose()


def test_columns_types_and_content(tmp_path, records):
    engine = build(tmp_path, "a", records)
    res = export(engine, tmp_path / "p")
    for name, schema in SCHEMAS.items():
        t = pq.read_table(res.paths()[name])
        assert t.schema.remove_metadata() == schema, name
        md = pq.read_metadata(res.paths()[name]).metadata
        assert md[b"nfb.dataset"] == name.encode()
        assert not any(b"time" in k.lower() or b"date" in k.lower() for k in md)
    nf = pd.read_parquet(tmp_path / "p" / "newforms")
    assert len(nf) == sum(len(r.newforms) for r in records) == res.rows["newforms"]
    assert all(t[0] == d for t, d in zip(nf["traces"], nf["dim"], strict=True))
    assert all(len(t) == PARAMS.trace_bound for t in nf["traces"])
    assert nf["traces_text"].isna().all()
    keys = list(zip(nf["weight"], nf["level"], nf["orbit"], strict=True))
    assert keys == sorted(keys)
    sp = pd.read_parquet(tmp_path / "p" / "spaces")
    assert len(sp) == len(UNITS)
    for col in (
        "level",
        "weight",
        "dim_cusp",
        "dim_new",
        "dim_old",
        "dim_eis",
        "num_orbits",
        "seconds",
    ):
        assert col in sp.columns
    ev = pd.read_parquet(tmp_path / "p" / "eigenvalues")
    small = nf[nf["dim"] <= PARAMS.dim_cap]
    assert set(ev["label"]) <= set(small["label"])
    assert (ev["p"] <= PARAMS.ap_bound).all()
    engine.dispose()


def test_no_timings_mode_nulls_seconds(tmp_path, records):
    engine = build(tmp_path, "a", records)
    export(engine, tmp_path / "p", timings=False)
    sp = pd.read_parquet(tmp_path / "p" / "spaces")
    assert sp["seconds"].isna().all()
    engine.dispose()


def test_int64_overflow_goes_to_text_twin(tmp_path, records):
    rec = records[0] if records[0].newforms else next(r for r in records if r.newforms)
    f = rec.newforms[0]
    big = [2**70 + 1, -(2**65), 1]
    rec2 = replace(rec, newforms=[replace(f, field_poly=big)] + rec.newforms[1:])
    engine = make_engine(f"sqlite:///{tmp_path / 'x.sqlite'}")
    init_schema(engine, PARAMS)
    Writer(engine).commit(rec2)
    export(engine, tmp_path / "p")
    nf = pd.read_parquet(tmp_path / "p" / "newforms")
    row = nf[nf["label"] == f.label].iloc[0]
    assert row["field_poly"] is None
    assert row["field_poly_text"] == "[1180591620717411303425,-36893488147419103232,1]"
    engine.dispose()


def test_full_disk_during_export_leaves_previous_export(tmp_path, records, monkeypatch):
    engine = build(tmp_path, "a", records)
    export(engine, tmp_path / "p")
    before = parquet_bytes(tmp_path / "p")

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(pqmod.pq.ParquetWriter, "write_table", full)
    with pytest.raises(StorageError, match="disk is full.*database is intact"):
        export(engine, tmp_path / "p")
    assert parquet_bytes(tmp_path / "p") == before
    leftovers = [p.name for p in (tmp_path / "p").rglob(".*")]
    assert leftovers == []
    engine.dispose()


# ----------------------------------------------------------------------------- characters

# every character orbit of 13w2 (orders 1, 2, 3, 4, 6, 12), 16w3 and 13w4 (see
# tests/tables_helpers.py for what they hold)
CHAR_UNITS = [(13, 2), (16, 3), (13, 4)]


@pytest.fixture(scope="module")
def char_records():
    from builder.characters import character_orbits

    return [
        compute_unit(N, k, PARAMS, char_index=chi.index)
        for N, k in CHAR_UNITS
        for chi in character_orbits(N)
    ]


def test_character_columns(tmp_path, char_records):
    engine = build(tmp_path, "c", char_records, order_seed=3)
    res = export(engine, tmp_path / "p")
    for name, schema in SCHEMAS.items():
        assert pq.read_table(res.paths()[name]).schema.remove_metadata() == schema, name
    sp = pd.read_parquet(tmp_path / "p" / "spaces")
    nf = pd.read_parquet(tmp_path / "p" / "newforms")
    assert len(sp) == len(char_records)
    keys = list(zip(sp["weight"], sp["level"], sp["char_index"], strict=True))
    assert keys == sorted(keys)
    by_unit = {(r.level, r.weight, r.char_index): r for r in char_records}
    for r in sp.itertuples():
        rec = by_unit[(r.level, r.weight, r.char_index)]
        assert (r.char_order, r.char_conductor, r.char_parity, r.char_number,
                r.char_degree) == (rec.char_order, rec.char_conductor, rec.char_parity,
                                   rec.char_number, rec.char_degree)  # fmt: skip
        forms = nf[(nf.level == r.level) & (nf.weight == r.weight)
                   & (nf.char_index == r.char_index)]  # fmt: skip
        # the record contract: Σ orbit dims (absolute) = char_degree · dim_new (over Q(χ))
        assert int(forms["dim"].sum()) == r.char_degree * r.dim_new
        assert int(forms["rel_dim"].sum()) == r.dim_new
        assert (forms["char_order"] == r.char_order).all()
    keys = list(zip(nf["weight"], nf["level"], nf["char_index"], nf["orbit"], strict=True))
    assert keys == sorted(keys)
    triv, chars = nf[nf.char_index == 0], nf[nf.char_index > 0]
    assert len(chars) >= 4 and set(chars["char_order"]) >= {3, 4, 6}
    assert chars["fricke_sign"].isna().all() and chars["root_number"].isna().all()
    assert chars["lvalue_zero"].isna().all() and chars["l_ratio"].isna().all()
    assert all(len(p) == 0 for p in chars["al_primes"])
    assert triv["fricke_sign"].notna().all() and (triv["rel_dim"] == triv["dim"]).all()
    # odd weight: only odd characters have newforms (χ(−1) = (−1)^k, a standard fact)
    odd = sp[sp.weight == 3]
    assert (odd[odd.char_parity == 1]["dim_new"] == 0).all()
    assert (odd[odd.char_parity == -1]["dim_new"] > 0).any()
    ev = pd.read_parquet(tmp_path / "p" / "eigenvalues")
    c = ev[ev.label == "13w2c4-1"]
    assert len(c) and all(len(x) == 2 for x in c["coords"])  # a_p ∈ Q(ζ_3), power basis
    engine.dispose()


def test_character_export_is_deterministic(tmp_path, char_records):
    e1 = build(tmp_path, "a", char_records)
    e2 = build(tmp_path, "b", char_records, order_seed=11)
    export(e1, tmp_path / "pa", timings=False)
    export(e2, tmp_path / "pb", timings=False)
    assert parquet_bytes(tmp_path / "pa") == parquet_bytes(tmp_path / "pb")
    e1.dispose()
    e2.dispose()
