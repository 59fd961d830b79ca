"""`nfb verify` passes on a fresh real table and names each deliberate corruption."""

from __future__ import annotations

import json
import sqlite3
from fractions import Fraction

import pytest

from builder.tables.source import open_source
from builder.tables.verify import CHECKS, verify
from tests.nfb_helpers import run_nfb
from tests.tables_helpers import CHAR_PARAMS, CHAR_UNITS, char_table, copy_table, small_table


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    return small_table(tmp_path_factory)


@pytest.fixture(scope="module")
def chars(tmp_path_factory):
    """Every character orbit of CHAR_UNITS (tests/tables_helpers.py); no lower levels."""
    return char_table(tmp_path_factory)


@pytest.fixture(scope="module")
def full_chars(chars, tmp_path_factory):
    """The character table plus every character orbit at every proper divisor level (all
    tiny), so that the trace formula with character is checked for every unit."""
    from builder.characters import character_orbits
    from builder.checks.formulas import divisors
    from builder.forms.record import Params, compute_unit
    from builder.storage.db import make_engine
    from builder.storage.writer import Writer

    t = copy_table(chars, tmp_path_factory.mktemp("chars") / "full")
    engine = make_engine(f"sqlite:///{t / 'newforms.sqlite'}")
    try:
        w = Writer(engine)
        lower = {(M, k) for N, k in CHAR_UNITS for M in divisors(N) if M < N}
        for M, k in sorted(lower - set(CHAR_UNITS)):
            for chi in character_orbits(M):
                w.commit(compute_unit(M, k, Params(**CHAR_PARAMS), char_index=chi.index))
    finally:
        engine.dispose()
    return t


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


# ----------------------------------------------------------------------------- characters
#
# Facts used below (sources in the docstring of builder/tables/verify.py):
# 13w2c4-1: χ of order 6 and conductor 13, K_f = Q(ζ_6) = Q[x]/(x² − x + 1), a_2 = −2 + ζ_6
#   (|a_2|² = 3 ≤ 8, Deligne), a_2² − a_4 = χ(2)·2 ([DS] Prop 5.3.1), |a_13|² = 13 ([Li] Thm 3).
# 21w2c4-1: χ of order 3 and conductor 7; 3 ∥ 21, 3 ∤ 7, so a_3² = χ'(3) and a_9 = a_3²
#   ([Li] Thm 3(i)); the trace formula needs the unit 7w2c2 (χ mod 7 inducing χ).
# 16w3c1-1: χ of conductor 4 at level 16, so a_2 = 0 ([Li] Thm 3(iii)).
# 16w3c4-1: χ of order 4, K_f a CM field of degree 6 = 2·3 (rel_dim 3).


def test_character_table_passes(chars):
    with open_source(chars) as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    char_units = {lab for lab in rep.result("dimensions").checked if "c" in lab}
    assert {"13w2c4", "16w3c4", "21w2c4", "7w3c1", "13w4c2"} <= char_units
    assert len(char_units) == 34 - len(CHAR_UNITS)
    orbit_labels = {"13w2c4-1", "21w2c4-1", "21w2c7-1", "7w3c1-1", "16w3c1-1", "16w3c4-1",
                    "13w4c2-2", "13w4c4-1"}  # fmt: skip
    for name in ("orbit records", "Deligne (exact a_p)", "exact a_p vs traces",
                 "multiplicativity", "Hecke recursion", "Atkin–Lehner"):  # fmt: skip
        assert orbit_labels <= rep.result(name).checked, name
    assert "16w3c1-1" in rep.result("CM").checked  # CM by −4: a_p = 0 for p ≡ 3 (mod 4)
    tf = rep.result("trace formula")
    # prime levels and χ of conductor N need no other unit ...
    assert {"13w2c4", "13w4c2", "13w4c4", "7w3c1", "16w3c4", "21w2c7"} <= tf.checked
    # ... the others need their (M, χ_M) below N: reported, not guessed
    why = dict(tf.not_checked)
    assert "7w2c2" in why["21w2c4"] and "4w3c1, 8w3c1" in why["16w3c1"]
    # the L-value check does not apply to a character (no root number): neither way
    assert not any("c" in lab for lab, _ in rep.result("L-value").not_checked)
    with open_source(parquet=chars / "parquet") as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    r = run_nfb("verify", chars)
    assert r.returncode == 0, r.stdout + r.stderr


def test_character_trace_formula_with_every_level(full_chars):
    with open_source(full_chars) as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    tf = rep.result("trace formula")
    assert not tf.not_checked, tf.not_checked
    assert {"21w2c4", "16w3c1", "16w3c2", "21w2c1"} <= tf.checked
    assert tf.checked == rep.result("dimensions").checked  # every unit


def test_wrong_character_dimension_and_data_are_named(chars, tmp_path):
    t = copy_table(chars, tmp_path / "t")
    _corrupt(
        t,
        "UPDATE spaces SET dim_cusp = dim_cusp + 1, dim_new = dim_new + 1 "
        "WHERE level = 21 AND weight = 2 AND char_index = 4",
        "UPDATE spaces SET char_conductor = 16 WHERE level = 16 AND weight = 3 "
        "AND char_index = 1",
    )
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["dimensions"] == {"21w2c4", "16w3c1"}
    assert bad["Σ dim = dim_new"] == {"21w2c4"}  # 2 ≠ [Q(χ):Q]·dim_new = 2·2
    details = [d for c, lab, d in rep.failures if c == "dimensions"]
    assert any("char_conductor = 16" in d and "gives 4" in d for d in details)
    r = run_nfb("verify", t)
    assert r.returncode == 1 and "FAIL dimensions: 21w2c4: dim_cusp = 2" in r.stdout


def test_wrong_character_traces_are_named(full_chars, tmp_path):
    t = copy_table(full_chars, tmp_path / "t")
    # Tr a_10 (10 = 2·5, coprime to 21) and Tr a_2 off by one
    _corrupt(t, "UPDATE newforms SET traces = json_set(traces, '$[9]', "
                "json_extract(traces, '$[9]') + 1) WHERE label = '21w2c4-1'",
                "UPDATE newforms SET traces = json_set(traces, '$[1]', "
                "json_extract(traces, '$[1]') + 1) WHERE label = '13w2c4-1'")  # fmt: skip
    with open_source(t) as src:
        bad = _failing(verify(src))
    assert bad["trace formula"] == {"21w2c4", "13w2c4"}
    assert bad["multiplicativity"] == {"21w2c4-1"}
    assert bad["exact a_p vs traces"] == {"13w2c4-1"}


def test_wrong_character_ap_is_named(chars, tmp_path):
    t = copy_table(chars, tmp_path / "t")
    # a_3 of 16w3c4-1 moved by the generator α (5/2 → 7/2): Tr changes by Tr α = 2
    _corrupt(t, "UPDATE eigenvalues SET coords = json_set(coords, '$[1]', '7/2') "
                "WHERE label = '16w3c4-1' AND p = 3")  # fmt: skip
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["exact a_p vs traces"] == {"16w3c4-1"}
    assert "16w3c4-1" in bad["multiplicativity"]  # Tr(a_3·a_5) ≠ Tr a_15
    r = run_nfb("verify", t)
    assert r.returncode == 1 and "FAIL exact a_p vs traces: 16w3c4-1: Tr(a_3)" in r.stdout


def test_bad_hecke_relation_with_character_is_named(chars, tmp_path):
    t = copy_table(chars, tmp_path / "t")
    # a_2 = −2 + ζ_6 of 13w2c4-1 replaced by −3 + 3ζ_6: the same trace −3 (so "exact a_p vs
    # traces" cannot see it), but Tr(a_2²) = −9 ≠ Tr a_4 + 2·Tr χ(2) = 1 + 2 and |a_2|² = 9 > 8
    _corrupt(t, "UPDATE eigenvalues SET coords = '[\"-3\",\"3\"]' "
                "WHERE label = '13w2c4-1' AND p = 2",
                # and Tr a_4 of 21w2c7-1 off by 2: a_2² − a_4 ≠ χ(2)·2
                "UPDATE newforms SET traces = json_set(traces, '$[3]', "
                "json_extract(traces, '$[3]') + 2) WHERE label = '21w2c7-1'")  # fmt: skip
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["Hecke recursion"] == {"13w2c4-1", "21w2c7-1"}
    assert "exact a_p vs traces" not in bad
    assert bad["Deligne (exact a_p)"] == {"13w2c4-1"}
    assert bad["trace formula"] == {"21w2c7"}  # n = 4 is coprime to 21
    details = {lab: d for c, lab, d in rep.failures if c == "Hecke recursion"}
    assert "Tr(a_2²) − Tr a_4 = -10" in details["13w2c4-1"]
    r = run_nfb("verify", t)
    assert r.returncode == 1 and "FAIL Hecke recursion: 21w2c7-1" in r.stdout


def test_bad_prime_rules_with_character_are_named(chars, tmp_path):
    t = copy_table(chars, tmp_path / "t")
    _corrupt(
        t,
        # 21w2c4-1: Tr a_9 ≠ Tr a_3² (3 ∥ 21, 3 ∤ cond χ = 7)
        "UPDATE newforms SET traces = json_set(traces, '$[8]', json_extract(traces, '$[8]') + 3) "
        "WHERE label = '21w2c4-1'",
        # 16w3c1-1: a_2 = 2 instead of 0 (2⁴ | 16, cond χ = 4), consistently in both tables
        "UPDATE newforms SET traces = json_set(traces, '$[1]', 2) WHERE label = '16w3c1-1'",
        "UPDATE eigenvalues SET coords = '[\"2\"]' WHERE label = '16w3c1-1' AND p = 2",
        # 13w2c4-1: a_13 doubled (|a_13|² = 52 ≠ 13), trace and all
        "UPDATE eigenvalues SET coords = json_array(CAST(2 * json_extract(coords, '$[0]') AS "
        "TEXT), CAST(2 * json_extract(coords, '$[1]') AS TEXT)) WHERE label = '13w2c4-1' "
        "AND p = 13",
        "UPDATE newforms SET traces = json_set(traces, '$[12]', 2 * json_extract(traces, "
        "'$[12]')) WHERE label = '13w2c4-1'",
    )
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["Atkin–Lehner"] == {"21w2c4-1", "16w3c1-1", "13w2c4-1"}
    details = {lab: d for c, lab, d in rep.failures if c == "Atkin–Lehner"}
    assert "Tr a_9" in details["21w2c4-1"] and "a_2" in details["16w3c1-1"]
    assert "a_13·ā_13" in details["13w2c4-1"]


def test_character_orbit_fields_are_named(chars, tmp_path):
    t = copy_table(chars, tmp_path / "t")
    _corrupt(
        t,
        "UPDATE newforms SET fricke_sign = 1, root_number = -1 WHERE label = '13w2c4-1'",
        "UPDATE newforms SET rel_dim = 6 WHERE label = '16w3c4-1'",
        "UPDATE newforms SET orbit = 2 WHERE label = '7w3c1-1'",
    )
    with open_source(t) as src:
        rep = verify(src)
    bad = _failing(rep)
    assert bad["orbit records"] == {"13w2c4-1", "16w3c4-1", "7w3c1", "7w3c1-1"}
    details = [d for c, lab, d in rep.failures if c == "orbit records"]
    assert any("fricke_sign = 1 must be null" in d for d in details)
    assert any("rel_dim 6·[Q(χ):Q] = 6·2 ≠ dim 6" in d for d in details)
    assert any("orbits numbered [2], not 1..1; missing 7w3c1-1" in d for d in details)
    assert any("'7w3c1-1' is not 7w3c1-2" in d for d in details)
    assert "L-value" not in bad  # not applicable to a character, whatever is stored


def test_wrong_pseudo_eigenvalues_are_named(chars, tmp_path):
    """χ ≠ 1, p ∤ cond χ ([AL78] Atkin–Li §1–2), on 21w2c4-1 (cond χ = 7, w_3 stored),
    one corruption at a time: w_3 negated (w·a_3 = −1 fails; |w| and w² do not see it);
    w_3 doubled (w²/3⁰ is no root of unity); the pseudo-eigenvalues dropped (they must be
    stored with exact a_p)."""
    with open_source(chars) as src:
        row = src.newforms().set_index("label").loc["21w2c4-1"]
    assert list(row["al_pseudo_primes"]) == [3]
    w = row["al_pseudo_values"]

    def scaled(s: int) -> str:
        return "al_pseudo_values = '" + json.dumps(
            [[str(s * Fraction(c)) for c in v] for v in w]) + "'"

    cases = {
        "w_3·a_3 ≠ -1": scaled(-1),
        "w_3²/3^0 is not a root of unity": scaled(2),
        "al_pseudo_primes [] (values null)": "al_pseudo_primes = '[]', al_pseudo_values = NULL",
    }
    for i, (message, change) in enumerate(cases.items()):
        t = copy_table(chars, tmp_path / f"t{i}")
        _corrupt(t, f"UPDATE newforms SET {change} WHERE label = '21w2c4-1'")
        with open_source(t) as src:
            rep = verify(src)
        assert _failing(rep) == {"Atkin–Lehner": {"21w2c4-1"}}, message
        details = [d for _, _, d in rep.failures]
        assert any(message in d for d in details), (message, details)


def test_orbit_split_over_q_chi_passes_and_is_checked(tmp_path, monkeypatch):
    """A unit whose new part was split as one orbit over Q(χ) (no field polynomial lifted;
    forced here on 23w3c3, degree 30) passes verify — Σ dim, traces, Deligne, the trace
    formula at a prime level; an empty field_poly on an orbit that is not the unit's only
    one (or that has hecke_poly_2) is named."""
    import builder.forms.charforms as cf
    from builder.forms.record import Params, compute_unit
    from builder.storage.db import init_schema, make_engine
    from builder.storage.writer import Writer

    monkeypatch.setattr(cf, "RELATIVE_ABOVE", 0)
    params = Params(**CHAR_PARAMS)
    rec = compute_unit(23, 3, params, char_index=3)
    assert rec.newforms[0].field_poly == [] and rec.num_orbits == 1
    engine = make_engine(f"sqlite:///{tmp_path / 'newforms.sqlite'}")
    try:
        init_schema(engine, params)
        Writer(engine).commit(rec)
    finally:
        engine.dispose()
    with open_source(tmp_path) as src:
        rep = verify(src)
    assert rep.ok, rep.failures
    assert "23w3c3" in rep.result("trace formula").checked
    _corrupt(tmp_path, "UPDATE newforms SET hecke_poly_2 = '[1, 1]' WHERE label = '23w3c3-1'")
    with open_source(tmp_path) as src:
        rep = verify(src)
    assert _failing(rep) == {"orbit records": {"23w3c3-1"}}
    assert "empty field_poly" in rep.failures[0][2]
