"""`nfb find` and the pandas API on a small REAL table, against plain pandas filters.

The reference of every case is a pandas filter written here on the Parquet export
read with ``pd.read_parquet`` (no nfb code involved); `find` must return exactly
the same labels from the SQLite database and from the Parquet export.
"""

from __future__ import annotations

import csv
import io
import json
import re
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from builder.pipeline.errors import BadInput
from builder.tables.api import Table
from builder.tables.find import Filters, find
from builder.tables.source import open_source
from tests.nfb_helpers import run_nfb
from tests.tables_helpers import char_table, read_export, small_table


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    return small_table(tmp_path_factory)


@pytest.fixture(scope="module")
def ref(table):
    sp, nf, ev = read_export(table)
    return sp, nf, ev


def _order(df):
    return df.sort_values(["level", "weight", "orbit"])["label"].tolist()


def _eps(row, p):
    primes = list(row.al_primes)
    return int(row.al_signs[primes.index(p)]) if p in primes else None


def _ap_value(ev, label, p):
    r = ev[(ev.label == label) & (ev.p == p)]
    return None if r.empty else list(r.iloc[0].coords)


def _embeddings(poly, coords):
    roots = np.roots(list(reversed([float(c) for c in poly])))
    vals = [sum(float(Fraction(c)) * r**i for i, c in enumerate(coords)) for r in roots]
    return [complex(v).real for v in vals]


# (filters for find, pandas reference predicate on one row of the export)
CASES = {
    "level range": (dict(level=(10, 25)), lambda r, ev: 10 <= r.level <= 25),
    "weight 4, dim 2..3": (
        dict(weight=4, dim=(2, 3)),
        lambda r, ev: r.weight == 4 and 2 <= r.dim <= 3,
    ),
    "rational weight 2": (
        dict(weight=2, rational=True),
        lambda r, ev: r.weight == 2 and r.dim == 1,
    ),
    "irrational": (dict(rational=False), lambda r, ev: r.dim > 1),
    "fricke +1": (dict(fricke=1), lambda r, ev: r.fricke_sign == 1),
    "root number -1 weight 2": (
        dict(root_number=-1, weight=2),
        lambda r, ev: r.root_number == -1 and r.weight == 2,
    ),
    "AL 2:-1": (dict(al={2: -1}), lambda r, ev: _eps(r, 2) == -1),
    "AL 2:-1 3:+1": (dict(al="2:-1,3:+1"), lambda r, ev: _eps(r, 2) == -1 and _eps(r, 3) == 1),
    "AL 3:+1 (not 13, 23)": (dict(al={3: 1}), lambda r, ev: _eps(r, 3) == 1),
    "AL pattern 2-3+": (dict(al_pattern="2-3+"), lambda r, ev: r.al_pattern == "2-3+"),
    "trace 2 in -1..1": (dict(trace={2: (-1, 1)}), lambda r, ev: -1 <= r.traces[1] <= 1),
    "trace 3 ≥ 2 and trace 5 ≤ 0": (
        dict(trace=[(3, (2, None)), (5, (None, 0))]),
        lambda r, ev: r.traces[2] >= 2 and r.traces[4] <= 0,
    ),
    "trace 40 (the last stored)": (dict(trace={40: 0}), lambda r, ev: r.traces[39] == 0),
    "CM": (dict(cm=True), lambda r, ev: bool(r.is_cm)),
    "CM by -4": (dict(cm_disc=-4), lambda r, ev: r.cm_disc == -4),
    "L-value zero": (dict(lzero=True), lambda r, ev: r.lvalue_zero is True),
    "L-value nonzero": (dict(lzero=False), lambda r, ev: r.lvalue_zero is False),
    "disc 5..20": (dict(disc=(5, 20)), lambda r, ev: 5 <= int(r.field_disc) <= 20),
    "a_3 = 0 (exact)": (
        dict(ap={3: 0}),
        lambda r, ev: (c := _ap_value(ev, r.label, 3)) is not None and all(x == "0" for x in c),
    ),
    "a_2 = -1 on rational weight 2": (
        dict(ap={2: -1}, weight=2, rational=True),
        lambda r, ev: r.weight == 2 and r.dim == 1 and _ap_value(ev, r.label, 2) == ["-1"],
    ),
    "a_5 in [-1.5, 1.5] for all embeddings, dim ≥ 2": (
        dict(ap={5: (-1.5, 1.5)}, dim=(2, None)),
        lambda r, ev: (
            r.dim >= 2
            and (c := _ap_value(ev, r.label, 5)) is not None
            and all(-1.5 <= v <= 1.5 for v in _embeddings(r.field_poly, c))
        ),
    ),
    "nothing": (dict(level=(1, 10), weight=2), lambda r, ev: r.level <= 10 and r.weight == 2),
    "combined": (
        dict(level=(1, 40), weight=(2, 4), al={2: 1}, trace={3: (-4, 4)}, lzero=False),
        lambda r, ev: _eps(r, 2) == 1 and -4 <= r.traces[2] <= 4 and r.lvalue_zero is False,
    ),
}


@pytest.mark.parametrize("kind", ["sqlite", "parquet"])
@pytest.mark.parametrize("case", sorted(CASES))
def test_find_matches_pandas(table, ref, kind, case):
    _, nf, ev = ref
    filters, pred = CASES[case]
    want = _order(nf[[bool(pred(r, ev)) for r in nf.itertuples()]])
    src = open_source(table) if kind == "sqlite" else open_source(parquet=table / "parquet")
    with src:
        got = find(src, Filters.from_kwargs(**filters))
    assert got["label"].tolist() == want, case


def test_cases_are_not_trivial(ref):
    _, nf, ev = ref
    sizes = {c: sum(bool(p(r, ev)) for r in nf.itertuples()) for c, (_, p) in CASES.items()}
    assert sizes["nothing"] == 0
    assert all(n > 0 for c, n in sizes.items() if c != "nothing"), sizes
    assert all(n < len(nf) for n in sizes.values()), sizes


def test_find_columns_for_conditions(table, ref):
    _, nf, _ = ref
    with open_source(table) as src:
        df = find(src, Filters.from_kwargs(weight=2, rational=True, trace={2: (-2, 2)}, ap={3: 0}))
    assert {"tr2", "a3"} <= set(df.columns)
    by = nf.set_index("label")
    for r in df.itertuples():
        assert r.tr2 == by.loc[r.label, "traces"][1]
        assert r.a3 == "0"


def test_api_table(table, ref):
    sp, nf, ev = ref
    with Table(table) as t:
        assert t.source.kind == "sqlite"
        spaces = t.spaces(weight=4)
        assert spaces["level"].tolist() == sp[sp.weight == 4].sort_values("level")["level"].tolist()
        assert sorted(t.spaces(level="10-12")["level"]) == [10, 10, 11, 11, 12, 12]
        forms = t.newforms(level=(30, 40), weight=2)
        want = nf[(nf.level.between(30, 40)) & (nf.weight == 2)]
        assert forms["label"].tolist() == _order(want)
        row = forms.set_index("label").loc["37w2-1"]
        assert list(row["traces"]) == list(nf.set_index("label").loc["37w2-1", "traces"])
        e = t.eigenvalues("37w2-1", primes=[2, 3, 5])
        assert e["coords"].tolist() == [["-2"], ["-3"], ["-2"]]
    with Table(parquet=table / "parquet") as t2:
        assert t2.newforms(level=(30, 40), weight=2)["label"].tolist() == forms["label"].tolist()


def test_api_filter_errors(table):
    with Table(table) as t:
        with pytest.raises(BadInput, match="not a prime"):
            t.newforms(ap={4: 0})
        with pytest.raises(BadInput, match="unknown filter"):
            t.newforms(levle=3)
        with pytest.raises(BadInput, match="empty range"):
            t.newforms(level="10..5")


def test_duckdb_on_the_export(table, ref):
    duckdb = pytest.importorskip("duckdb", reason="duckdb not installed: pip install 'nfb[search]'")
    assert duckdb
    _, nf, _ = ref
    with Table(table) as t:
        con = t.duckdb()
        rows = con.execute(
            "SELECT label FROM newforms WHERE weight = 2 AND dim = 1 "
            "AND traces[2] BETWEEN -1 AND 1 ORDER BY level, orbit"
        ).fetchall()
    mask = (nf.weight == 2) & (nf.dim == 1) & np.array([t[1] in (-1, 0, 1) for t in nf.traces])
    want = nf[mask]
    assert [r[0] for r in rows] == _order(want)


# ----------------------------------------------------------------------------- the CLI


def test_cli_find_csv_json_table(table, ref):
    _, nf, _ = ref
    want = _order(nf[[_eps(r, 2) == -1 and r.weight == 2 for r in nf.itertuples()]])
    r = run_nfb("find", "--out", table, "--weight", "2", "--al", "2:-1", "--format", "csv")
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert [x["label"] for x in rows] == want
    r = run_nfb("find", "--parquet", table / "parquet", "--weight", "2", "--al", "2:-1",
                "--format", "json", "--trace", "3:..0")  # fmt: skip
    assert r.returncode == 0, r.stderr
    docs = json.loads(r.stdout)
    by = nf.set_index("label")
    assert [d["label"] for d in docs] == [x for x in want if by.loc[x, "traces"][2] <= 0]
    assert all(d["tr3"] <= 0 for d in docs)
    r = run_nfb("find", "--out", table, "--level", "11", "--limit", "0")
    assert r.returncode == 0, r.stderr
    assert "11w2-1" in r.stdout and "11w4-1" in r.stdout
    assert re.search(r"\b2 rows\b", r.stdout)


def test_cli_find_bad_input_exit_2(table, tmp_path):
    r = run_nfb("find", "--out", table, "--trace", "2")
    assert r.returncode == 2 and "--trace" in r.stderr
    r = run_nfb("find", "--out", table, "--al", "4:+1")
    assert r.returncode == 2 and "not a prime" in r.stderr
    r = run_nfb("find", "--out", tmp_path / "nothing-here")
    assert r.returncode == 2 and "no nfb table here" in r.stderr


# ----------------------------------------------------------------------------- README examples


QUICKSTART = Path(__file__).resolve().parents[1] / "output" / "quickstart"


def test_readme_examples_on_the_quickstart_output():
    """The numbers quoted in README "Searching, verifying, reporting" (the quickstart table is
    built by the README's first set-up command, which .ci/run runs before the tests)."""
    if not (QUICKSTART / "newforms.sqlite").exists():
        pytest.skip("no output/quickstart (run `nfb run jobs/quickstart.toml` first)")
    with Table(QUICKSTART) as t:
        got = t.newforms(weight=2, al={2: -1, 3: 1}, trace={5: (-2, 2)})
        assert got["label"].tolist() == ["24w2-1", "36w2-1", "42w2-1", "66w2-2", "90w2-2",
                                         "96w2-1"]  # fmt: skip
        nf = t.newforms(level=(1, 100))
        two = nf[nf.al_primes.map(len) == 2]
        table = two.groupby(["weight", two.al_signs.map(tuple)]).dim.sum().unstack()
        assert table.loc[2].tolist() == [2, 64, 49, 12]
        assert table.loc[4].tolist() == [156, 59, 62, 98]
        odd = t.newforms(weight=2, rational=True, root_number=-1)
        assert len(odd) == 17 and set(odd["l_ratio"]) == {"0"}
        w4 = t.newforms(weight=4, al={2: -1, 3: -1}, trace={5: (-10, 10)})
        assert w4["label"].tolist() == ["18w4-1", "30w4-2", "42w4-2", "48w4-3", "54w4-3",
                                        "66w4-3", "72w4-3", "78w4-6", "90w4-4", "96w4-5",
                                        "96w4-6"]  # fmt: skip


@pytest.mark.parametrize("cmd", ["find", "sql", "verify", "report"])
def test_help(cmd):
    r = run_nfb(cmd, "--help")
    assert r.returncode == 0 and "Usage" in r.stdout


# ----------------------------------------------------------------------------- characters


@pytest.fixture(scope="module")
def char_tab(tmp_path_factory):
    return char_table(tmp_path_factory)


@pytest.fixture(scope="module")
def char_ref(char_tab):
    return read_export(char_tab)


def _unit(sp, r):
    return sp[(sp.level == r.level) & (sp.weight == r.weight)
              & (sp.char_index == r.char_index)].iloc[0]  # fmt: skip


def _ap_range_ref(r, ev, p, lo, hi):
    """The documented meaning of an a_p range: every embedding real and in [lo, hi]
    (decided for totally real K_f); for other fields only a rational a_p can match."""
    c = _ap_value(ev, r.label, p)
    if c is None:
        return False
    roots = np.roots(list(reversed([float(x) for x in r.field_poly])))
    if all(abs(z.imag) < 1e-9 for z in roots):
        return all(lo <= v <= hi for v in _embeddings(r.field_poly, c))
    return all(Fraction(x) == 0 for x in c[1:]) and lo <= Fraction(c[0]) <= hi


# (filters, pandas reference predicate on (row, spaces, eigenvalues))
CHAR_CASES = {
    "order 2": (dict(char_order=2), lambda r, sp, ev: r.char_order == 2),
    "order 3..": (dict(char_order="3.."), lambda r, sp, ev: r.char_order >= 3),
    "trivial": (dict(trivial_char=True), lambda r, sp, ev: r.char_order == 1),
    "nontrivial weight 4": (
        dict(trivial_char=False, weight=4),
        lambda r, sp, ev: r.char_order > 1 and r.weight == 4,
    ),
    "index 1-2": (dict(char_index="1-2"), lambda r, sp, ev: 1 <= r.char_index <= 2),
    "conductor 13": (dict(char_conductor=13), lambda r, sp, ev: _unit(sp, r).char_conductor == 13),
    "conductor 3..7, order 2": (
        dict(conductor=(3, 7), char_order=2),
        lambda r, sp, ev: 3 <= _unit(sp, r).char_conductor <= 7 and r.char_order == 2,
    ),
    "odd": (dict(char_parity="odd"), lambda r, sp, ev: _unit(sp, r).char_parity == -1),
    "even nontrivial": (
        dict(char_parity=1, trivial_char=False),
        lambda r, sp, ev: _unit(sp, r).char_parity == 1 and r.char_order > 1,
    ),
    "rel_dim 2": (dict(rel_dim=2), lambda r, sp, ev: r.rel_dim == 2),
    "dim 2 rel_dim 1": (dict(dim=2, rel_dim=1), lambda r, sp, ev: r.dim == 2 and r.rel_dim == 1),
    # NULL for a nontrivial character: never matches
    "fricke -1": (dict(fricke=-1), lambda r, sp, ev: r.fricke_sign == -1),
    "root number +1": (dict(root_number=1), lambda r, sp, ev: r.root_number == 1),
    "lzero false": (dict(lzero=False), lambda r, sp, ev: r.lvalue_zero is False),
    "CM nontrivial": (dict(cm=True, trivial_char=False), lambda r, sp, ev: bool(r.is_cm)
                      and r.char_order > 1),  # fmt: skip
    "a_2 = 0": (
        dict(ap={2: 0}),
        lambda r, sp, ev: (c := _ap_value(ev, r.label, 2)) is not None
        and all(Fraction(x) == 0 for x in c),
    ),
    "a_5 in -6..6": (
        dict(ap={5: (-6, 6)}),
        lambda r, sp, ev: _ap_range_ref(r, ev, 5, -6, 6),
    ),
    "trace 2 ≤ -1, nontrivial": (
        dict(trace={2: (None, -1)}, trivial_char=False),
        lambda r, sp, ev: r.traces[1] <= -1 and r.char_order > 1,
    ),
}


@pytest.mark.parametrize("kind", ["sqlite", "parquet"])
def test_find_characters_matches_pandas(char_tab, char_ref, kind):
    sp, nf, ev = char_ref
    src = open_source(char_tab) if kind == "sqlite" else open_source(parquet=char_tab / "parquet")
    with src:
        for case, (filters, pred) in CHAR_CASES.items():
            want = nf[[bool(pred(r, sp, ev)) for r in nf.itertuples()]]
            want = want.sort_values(["level", "weight", "char_index", "orbit"])["label"].tolist()
            got = find(src, Filters.from_kwargs(**filters))
            assert got["label"].tolist() == want, case


def test_character_cases_are_not_trivial(char_ref):
    sp, nf, ev = char_ref
    sizes = {
        c: sum(bool(p(r, sp, ev)) for r in nf.itertuples()) for c, (_, p) in CHAR_CASES.items()
    }
    assert all(0 < n < len(nf) for n in sizes.values()), sizes
    # the sign conditions only ever see trivial-character orbits
    assert sizes["fricke -1"] + sizes["root number +1"] <= (nf.char_order == 1).sum() * 2


def test_find_character_columns(char_tab):
    with Table(char_tab) as t:
        df = t.newforms(columns="default", level=13, weight=2)
        assert df["label"].tolist() == ["13w2c4-1"]
        row = df.iloc[0]
        assert (row["char_order"], row["dim"], row["rel_dim"]) == (6, 2, 1)
        assert row["fricke_sign"] is None or np.isnan(row["fricke_sign"])
        sp = t.spaces(char_order="2..")
        assert len(sp) and (sp["char_order"] >= 2).all()
        assert {"char_conductor", "char_parity", "char_number", "char_degree"} <= set(sp.columns)
        assert t.spaces(level=13, char_order=6)["char_index"].tolist() == [4, 4]
    with pytest.raises(BadInput, match="parity"):
        Filters.from_kwargs(char_parity=3)


def test_cli_find_character_flags(char_tab, char_ref):
    sp, nf, _ = char_ref
    r = run_nfb("find", "--out", char_tab, "--char-order", "2..", "--char-parity", "odd",
                "--format", "json")  # fmt: skip
    assert r.returncode == 0, r.stderr
    docs = json.loads(r.stdout)
    odd = {(u.level, u.weight, u.char_index) for u in sp.itertuples() if u.char_parity == -1}
    want = nf[[(x.level, x.weight, x.char_index) in odd and x.char_order > 1
               for x in nf.itertuples()]]  # fmt: skip
    assert sorted(d["label"] for d in docs) == sorted(want["label"])
    assert all(d["fricke_sign"] is None and d["char_order"] > 1 for d in docs)
    r = run_nfb("find", "--parquet", char_tab / "parquet", "--conductor", "13",
                "--nontrivial-char", "--char-index", "2", "--format", "csv")  # fmt: skip
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert [x["label"] for x in rows] == ["13w4c2-1", "13w4c2-2"]
    r = run_nfb("find", "--out", char_tab, "--trivial-char", "--rel-dim", "1", "--limit", "0")
    assert r.returncode == 0, r.stderr
    assert "11w2-1" in r.stdout and "c" not in "".join(re.findall(r"\b\d+w\d+\S*-\d+", r.stdout))
    r = run_nfb("find", "--out", char_tab, "--char-parity", "sideways")
    assert r.returncode == 2 and "--char-parity" in r.stderr
    r = run_nfb("find", "--out", char_tab, "--char-order", "5..2")
    assert r.returncode == 2 and "--char-order" in r.stderr
