"""`nfb verify` passes on a fresh real table and names each deliberate corruption."""

from __future__ import annotations

import json
import sqlite3

import pytest

from builder.tables.source import open_source
from builder.tables.verify import CHECKS, verify
from tests.nfb_helpers import run_nfb
from tests.tables_helpers import copy_table, small_table


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    return small_table(tmp_path_factory)


def _corrupt(out, *statements):
    conn = sqlite3.connect(out / "newforms.sqlite")
    try:
        conn.execute("PRAGMA foreign_keys = ON")
        for s in statements:
            cur = conn.execute(s)
            assert cur.rowcount != 0, s
        conn.commit()
    finally:
        conn.close()


def _failing(report) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for check, label, _ in report.failures:
        out.setdefault(check, set()).add(label)
    return out


def test_fresh_table_passes(table):
    with open_source(table) as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    assert rep.units == 80 and rep.orbits > 0
    for name, _ in CHECKS:
        r = rep.result(name)
        assert r.checked, name  # every check really looked at something
    assert len(rep.result("trace formula").checked) == 80  # every level has its divisors
    r = run_nfb("verify", table)
    assert r.returncode == 0, r.stdout + r.stderr
    assert "all checks passed" in r.stdout
    for name, _ in CHECKS:
        assert name in r.stdout


def test_parquet_export_passes(table):
    with open_source(parquet=table / "parquet") as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    assert rep.units == 80


def test_corrupted_trace_is_named(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    # Tr a_10 of 11w2-1 (rational; 10 = 2·5 is coprime to 11 and 33) off by one
    _corrupt(t, "UPDATE newforms SET traces = json_set(traces, '$[9]', "
                "json_extract(traces, '$[9]') + 1) WHERE label = '11w2-1'")  # fmt: skip
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert "11w2-1" in bad["multiplicativity"]
    assert bad["trace formula"] == {"11w2", "33w2"}  # 22w2: 10 is not coprime to 22
    assert not rep.ok and rep.exit_code() == 1
    r = run_nfb("verify", t)
    assert r.returncode == 1
    assert "FAIL multiplicativity: 11w2-1" in r.stdout
    assert "FAIL trace formula: 11w2:" in r.stdout and "n=10" in r.stdout


def test_corrupted_prime_trace_is_named(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    # Tr a_7 of the 2-dimensional orbit 23w2-1 changed: disagrees with its exact a_7
    _corrupt(t, "UPDATE newforms SET traces = json_set(traces, '$[6]', "
                "json_extract(traces, '$[6]') + 2) WHERE label = '23w2-1'")  # fmt: skip
    with open_source(t) as src:
        bad = _failing(verify(src))
    assert "23w2-1" in bad["exact a_p vs traces"]
    assert "23w2" in bad["trace formula"]


def test_flipped_atkin_lehner_sign_is_named(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    # 14w2-1 has ε_2 = +1, ε_7 = −1; flip ε_2 consistently in al_signs and al_pattern
    _corrupt(t, "UPDATE newforms SET al_signs = json_set(al_signs, '$[0]', "
                "-json_extract(al_signs, '$[0]')), al_pattern = CASE al_pattern "
                "WHEN '2+7-' THEN '2-7-' ELSE '2+7-' END WHERE label = '14w2-1'")  # fmt: skip
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad == {"Atkin–Lehner": {"14w2-1"}}, bad
    details = [d for c, lab, d in rep.failures]
    assert any("Tr a_2" in d for d in details) and any("fricke_sign" in d for d in details)
    r = run_nfb("verify", t)
    assert r.returncode == 1 and "FAIL Atkin–Lehner: 14w2-1" in r.stdout


def test_flipped_fricke_sign_is_named(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    _corrupt(t, "UPDATE newforms SET fricke_sign = -fricke_sign WHERE label = '37w2-1'")
    with open_source(t) as src:
        bad = _failing(verify(src))
    assert "37w2-1" in bad["Atkin–Lehner"]


def test_deleted_orbit_is_named(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    # eigenvalues go with the orbit (ON DELETE CASCADE)
    _corrupt(t, "DELETE FROM newforms WHERE label = '30w4-2'")
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert "30w4" in bad["Σ dim = dim_new"]
    assert "30w4" in bad["orbit records"]
    assert "30w4" in bad["trace formula"]
    assert any("missing 30w4-2" in d for c, lab, d in rep.failures if c == "orbit records")
    r = run_nfb("verify", t)
    assert r.returncode == 1
    assert "30w4-2" in r.stdout and "FAIL Σ dim = dim_new: 30w4" in r.stdout


def test_missing_divisor_level_is_reported_not_guessed(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    _corrupt(t, "DELETE FROM spaces WHERE level = 10 AND weight = 2")
    with open_source(t) as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    tf = rep.result("trace formula")
    skipped = {lab for lab, _ in tf.not_checked}
    assert skipped == {"20w2", "30w2", "40w2"}
    assert all("divisor levels 10 of weight 2" in why for _, why in tf.not_checked)
    r = run_nfb("verify", t)
    assert r.returncode == 0
    assert "not checked trace formula: divisor levels 10 of weight 2 not in the table" in r.stdout
    assert "20w2" in r.stdout
    r = run_nfb("verify", t, "--strict")
    assert r.returncode == 1


def test_failed_unit_and_wrong_dimension(table, tmp_path):
    t = copy_table(table, tmp_path / "t")
    _corrupt(
        t,
        "UPDATE spaces SET dim_cusp = dim_cusp + 1, dim_old = dim_old + 1 "
        "WHERE level = 35 AND weight = 2",
        "DELETE FROM newforms WHERE level = 36 AND weight = 4",
        "UPDATE spaces SET status = 'failed', error = 'Traceback ...\nValueError: boom' "
        "WHERE level = 36 AND weight = 4",
    )
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["dimensions"] == {"35w2"}
    assert bad["units complete"] == {"36w4"}
    r = run_nfb("verify", t, "--json")
    assert r.returncode == 1
    doc = json.loads(r.stdout)
    assert doc["ok"] is False
    dims = next(c for c in doc["checks"] if c["name"] == "dimensions")
    assert dims["failures"][0]["label"] == "35w2" and "dim_cusp" in dims["failures"][0]["detail"]


def test_verify_bad_input(tmp_path):
    r = run_nfb("verify", tmp_path / "nothing")
    assert r.returncode == 2 and "no nfb table here" in r.stderr
