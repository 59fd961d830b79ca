"""Range searches over a finished table: the engine behind `nfb find` and ``Table.newforms``.

A search is a ``Filters`` value. Every condition is pushed down to the source
(SQL ``WHERE`` on SQLite/PostgreSQL, row-group filters and Arrow compute on the
Parquet export); the few that SQL cannot decide exactly are re-checked in
Python on the rows that survive:

* ``disc``   — ``field_disc`` is a decimal string of any size: SQL compares a numeric
               cast with slack, Python compares the exact integers;
* ``ap``     — a_p of a rational orbit is an integer and is compared in SQL; for an
               orbit of degree > 1 the condition means *a_p = v exactly in K_f*
               (value) or *every real embedding of a_p lies in [lo, hi]* (range),
               decided exactly (builder/tables/numfield.py).

Range syntax (CLI strings, also accepted by the API): ``5``, ``2..10``, ``..10``,
``2..``, for non-negative quantities also ``2-10``; several joined by commas are
a union (``2,4`` or ``1-10,50-60``). Indexed conditions are ``INDEX:RANGE``
(``--trace 2:-2..2`` = Tr a_2 ∈ [−2, 2]; ``--ap 3:0`` = a_3 = 0) and may be repeated
(all must hold). Atkin–Lehner signs: ``--al 2:-1,5:+1`` = ε_2 = −1 and ε_5 = +1,
which also requires 2 | N and 5 | N.

Characters: ``char_order``, ``char_index``, ``rel_dim`` (ranges) and ``trivial_char``
are columns of ``newforms``; ``char_conductor`` (ranges) and ``char_parity`` (±1) are
columns of ``spaces``, asked through the orbit's unit (an ``EXISTS`` in SQL, a key
look-up on the ``spaces`` dataset for Parquet).

Orbits whose data cannot answer a condition are not returned: a trace condition
on n > trace_bound, an a_p condition on an orbit without stored eigenvalues
(dim > dim_cap) or with p > ap_bound, an L-value condition where ``lvalue_zero``
is null (not decided by the math core), a Fricke / root number / Atkin–Lehner
condition on an orbit with a nontrivial character (those are null / empty). An
a_p *range* condition asks for every embedding of a_p to be a real number in the
range: for the trivial character K_f is totally real and that is decided exactly;
for a nontrivial character K_f need not be, and the condition then matches only
when a_p is rational (exact a_p values, ``--ap 3:0``, are always decided exactly).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as ds
from sqlalchemy import Integer, Numeric, and_, case, cast, exists, false, or_, select, true

from builder.checks.formulas import is_prime
from builder.pipeline.errors import BadInput
from builder.storage.models import STATUS_DONE, Eigenvalue, Newform, Space
from builder.tables.numfield import NumberField
from builder.tables.source import NEWFORM_COLUMNS, Source, arrow_newforms_to_pandas, parquet_columns

Interval = tuple[Fraction | None, Fraction | None]  # closed; None = unbounded
Ranges = tuple[Interval, ...]  # a union of intervals

WHERE = "command line"

# columns of a search result (besides tr<n> / a<p> of the conditions asked for)
DEFAULT_COLUMNS = [
    "label",
    "level",
    "weight",
    "char_order",
    "orbit",
    "dim",
    "rel_dim",
    "field_poly",
    "field_disc",
    "al_pattern",
    "fricke_sign",
    "root_number",
    "is_cm",
    "cm_disc",
    "lvalue_zero",
    "l_ratio",
    "has_ap",
]

# ----------------------------------------------------------------------------- parsing

_NUM = r"[+-]?\d+(?:/\d+|\.\d+)?"


def _num(text: str, what: str, integer: bool) -> Fraction:
    try:
        v = Fraction(text)
    except (ValueError, ZeroDivisionError):
        raise BadInput(WHERE, what, f"not a number: {text!r}") from None
    if integer and v.denominator != 1:
        raise BadInput(WHERE, what, f"expected an integer, got {text!r}")
    return v


def parse_ranges(text: str, what: str, *, integer: bool = True, signed: bool = True) -> Ranges:
    """'5', '2..10', '..10', '2..', (unsigned) '2-10'; comma-separated = union."""
    pieces = [p.strip() for p in str(text).split(",")]
    if not pieces or any(not p for p in pieces):
        raise BadInput(WHERE, what, f"empty range in {text!r}")
    out: list[Interval] = []
    for piece in pieces:
        if ".." in piece:
            a, _, b = piece.partition("..")
            lo = _num(a.strip(), what, integer) if a.strip() else None
            hi = _num(b.strip(), what, integer) if b.strip() else None
        elif not signed and re.fullmatch(r"\d+\s*-\s*\d+", piece):
            a, _, b = piece.partition("-")
            lo, hi = _num(a.strip(), what, integer), _num(b.strip(), what, integer)
        else:
            lo = hi = _num(piece, what, integer)
        if lo is not None and hi is not None and lo > hi:
            raise BadInput(WHERE, what, f"empty range {piece!r} (lower end above upper end)")
        out.append((lo, hi))
    return tuple(out)


def coerce_ranges(value: Any, what: str, *, integer: bool = True, signed: bool = True) -> Ranges:
    """API values: 37, (1, 100), (None, 10), "1-100", [2, 4], or already a Ranges."""
    if value is None:
        return None
    if isinstance(value, str):
        return parse_ranges(value, what, integer=integer, signed=signed)
    if isinstance(value, bool):
        raise BadInput("api", what, f"expected a number or a range, got {value!r}")
    if isinstance(value, int | Fraction):
        v = Fraction(value)
        return ((v, v),)
    if isinstance(value, float):
        v = Fraction(str(value))
        return ((v, v),)
    if (
        isinstance(value, tuple)
        and len(value) == 2
        and not any(isinstance(x, tuple | list) for x in value)
    ):
        lo, hi = (None if x is None else Fraction(str(x)) for x in value)
        if lo is not None and hi is not None and lo > hi:
            raise BadInput("api", what, f"empty range {value!r}")
        return ((lo, hi),)
    if isinstance(value, list | tuple | set | frozenset):
        out: list[Interval] = []
        for v in value:
            out.extend(coerce_ranges(v, what, integer=integer, signed=signed))
        return tuple(out)
    raise BadInput("api", what, f"cannot read a range from {value!r}")


def parse_sign(text: Any, what: str) -> int:
    s = str(text).strip()
    table = {"+": 1, "+1": 1, "1": 1, "-": -1, "-1": -1}
    if s not in table:
        raise BadInput(WHERE, what, f"a sign is +1 or -1 (or + / -), got {text!r}")
    return table[s]


def parse_parity(text: Any, what: str) -> int:
    """χ(−1): +1 / even or −1 / odd."""
    s = str(text).strip().lower()
    if s in ("even", "odd"):
        return 1 if s == "even" else -1
    try:
        return parse_sign(s, what)
    except BadInput:
        raise BadInput(WHERE, what, f"a parity is +1 / even or -1 / odd, got {text!r}") from None


def _check_prime(p: int, what: str) -> int:
    if not is_prime(p):
        raise BadInput(WHERE, what, f"{p} is not a prime")
    return p


def parse_al(text: str, what: str = "--al") -> dict[int, int]:
    """'2:-1,5:+1' → {2: -1, 5: 1}."""
    out: dict[int, int] = {}
    for piece in str(text).split(","):
        piece = piece.strip()
        m = re.fullmatch(r"(\d+)\s*[:=]\s*([+-]?1?|[+-])", piece)
        if not m or not m.group(2):
            raise BadInput(WHERE, what, f"expected PRIME:SIGN like 2:-1, got {piece!r}")
        p = _check_prime(int(m.group(1)), what)
        s = parse_sign(m.group(2), what)
        if out.get(p, s) != s:
            raise BadInput(WHERE, what, f"two different signs asked for p = {p}")
        out[p] = s
    return out


def parse_indexed(
    text: str, what: str, *, prime: bool, integer: bool = True
) -> list[tuple[int, Ranges]]:
    """'2:-2..2' → [(2, ((-2, 2),))]; several joined by ';' are all required."""
    out = []
    for piece in str(text).split(";"):
        idx, sep, rng = piece.strip().partition(":")
        if not sep or not idx.strip().isdigit():
            raise BadInput(WHERE, what, f"expected INDEX:RANGE like 2:-2..2, got {piece!r}")
        n = int(idx)
        if n < 1:
            raise BadInput(WHERE, what, f"index must be ≥ 1, got {n}")
        if prime:
            _check_prime(n, what)
        out.append((n, parse_ranges(rng, what, integer=integer)))
    return out


def _coerce_indexed(value: Any, what: str, *, prime: bool, integer: bool) -> list:
    """API: {2: (-2, 2), 3: 0} or [(2, (-2, 2))] or the CLI string."""
    if value is None:
        return []
    if isinstance(value, str):
        return parse_indexed(value, what, prime=prime, integer=integer)
    items = value.items() if isinstance(value, dict) else value
    out = []
    for idx, rng in items:
        idx = int(idx)
        if prime:
            _check_prime(idx, what)
        elif idx < 1:
            raise BadInput("api", what, f"index must be ≥ 1, got {idx}")
        out.append((idx, coerce_ranges(rng, what, integer=integer)))
    return out


# ----------------------------------------------------------------------------- filters


@dataclass
class Filters:
    """One search. ``None`` / empty means "no condition"."""

    level: Ranges | None = None
    weight: Ranges | None = None
    dim: Ranges | None = None  # orbit dimension = degree of the coefficient field
    disc: Ranges | None = None  # discriminant of the stored field polynomial
    rational: bool | None = None  # dim == 1
    fricke: int | None = None
    root_number: int | None = None
    al: dict[int, int] = field(default_factory=dict)  # p ↦ ε_p
    al_pattern: str | None = None  # the whole pattern, e.g. "2+3-"
    ap: list[tuple[int, Ranges]] = field(default_factory=list)
    trace: list[tuple[int, Ranges]] = field(default_factory=list)
    cm: bool | None = None
    cm_disc: int | None = None
    lzero: bool | None = None
    has_ap: bool | None = None
    labels: list[str] | None = None
    char_order: Ranges | None = None  # order of the character χ
    char_index: Ranges | None = None  # our index of χ's orbit at the level (0 = trivial)
    trivial_char: bool | None = None  # char_order == 1 / > 1
    char_conductor: Ranges | None = None  # conductor of χ (a spaces column)
    char_parity: int | None = None  # χ(−1) (a spaces column)
    rel_dim: Ranges | None = None  # [K_f : Q(χ)]

    API_KEYS = (
        "level weight dim degree disc rational fricke root_number al al_pattern ap trace "
        "cm cm_disc lzero has_ap label labels char_order char_index trivial_char "
        "char_conductor conductor char_parity rel_dim"
    ).split()

    @classmethod
    def from_kwargs(cls, **kw: Any) -> Filters:
        """The API form: level=(1, 100), weight=2, al={2: -1}, trace={2: (-2, 2)}, ap={3: 0}, …"""
        unknown = set(kw) - set(cls.API_KEYS)
        if unknown:
            raise BadInput("api", sorted(unknown)[0], f"unknown filter; known: {cls.API_KEYS}")
        f = cls()
        f.level = coerce_ranges(kw.get("level"), "level", signed=False)
        f.weight = coerce_ranges(kw.get("weight"), "weight", signed=False)
        dim = kw.get("dim", kw.get("degree"))
        f.dim = coerce_ranges(dim, "dim", signed=False)
        f.disc = coerce_ranges(kw.get("disc"), "disc")
        f.rational = kw.get("rational")
        f.fricke = None if kw.get("fricke") is None else parse_sign(kw["fricke"], "fricke")
        rn = kw.get("root_number")
        f.root_number = None if rn is None else parse_sign(rn, "root_number")
        al = kw.get("al")
        if isinstance(al, str):
            f.al = parse_al(al, "al")
        elif al:
            f.al = {_check_prime(int(p), "al"): parse_sign(s, "al") for p, s in al.items()}
        f.al_pattern = kw.get("al_pattern")
        f.ap = _coerce_indexed(kw.get("ap"), "ap", prime=True, integer=False)
        f.trace = _coerce_indexed(kw.get("trace"), "trace", prime=False, integer=True)
        f.cm = kw.get("cm")
        f.cm_disc = kw.get("cm_disc")
        f.lzero = kw.get("lzero")
        f.has_ap = kw.get("has_ap")
        labels = kw.get("labels", kw.get("label"))
        f.labels = [labels] if isinstance(labels, str) else (list(labels) if labels else None)
        f.char_order = coerce_ranges(kw.get("char_order"), "char_order", signed=False)
        f.char_index = coerce_ranges(kw.get("char_index"), "char_index", signed=False)
        f.trivial_char = kw.get("trivial_char")
        cond = kw.get("char_conductor", kw.get("conductor"))
        f.char_conductor = coerce_ranges(cond, "char_conductor", signed=False)
        par = kw.get("char_parity")
        f.char_parity = None if par is None else parse_parity(par, "char_parity")
        f.rel_dim = coerce_ranges(kw.get("rel_dim"), "rel_dim", signed=False)
        return f

    def describe(self) -> str:
        parts = []
        for name in (
            "level", "weight", "dim", "rel_dim", "disc", "char_order", "char_index",
            "char_conductor",
        ):  # fmt: skip
            r = getattr(self, name)
            if r:
                parts.append(f"{name} {_fmt_ranges(r)}")
        if self.char_parity is not None:
            parts.append("even character" if self.char_parity > 0 else "odd character")
        for name in ("rational", "cm", "lzero", "has_ap", "trivial_char"):
            v = getattr(self, name)
            if v is not None:
                parts.append(name if v else f"not {name}")
        for name in ("fricke", "root_number", "cm_disc", "al_pattern"):
            v = getattr(self, name)
            if v is not None:
                parts.append(
                    f"{name} {v:+d}" if isinstance(v, int) and name != "cm_disc" else f"{name} {v}"
                )
        if self.al:
            parts.append("AL " + ",".join(f"{p}:{s:+d}" for p, s in sorted(self.al.items())))
        for n, r in self.trace:
            parts.append(f"Tr a_{n} in {_fmt_ranges(r)}")
        for p, r in self.ap:
            parts.append(f"a_{p} in {_fmt_ranges(r)}")
        if self.labels:
            parts.append(f"labels {','.join(self.labels)}")
        return "; ".join(parts) or "everything"


def _fmt_ranges(r: Ranges) -> str:
    def one(iv: Interval) -> str:
        lo, hi = iv
        if lo is not None and lo == hi:
            return str(lo)
        return f"{'' if lo is None else lo}..{'' if hi is None else hi}"

    return ",".join(one(iv) for iv in r)


def _int_bounds(iv: Interval) -> tuple[int | None, int | None]:
    """Closed integer bounds of an interval for integer-valued columns."""
    lo, hi = iv
    return (None if lo is None else math.ceil(lo)), (None if hi is None else math.floor(hi))


def in_ranges(x, r: Ranges) -> bool:
    if x is None:
        return False
    return any((lo is None or x >= lo) and (hi is None or x <= hi) for lo, hi in r)


def _al_token_regex(p: int, s: int) -> str:
    return rf"(^|[+-]){p}{re.escape('+' if s > 0 else '-')}"


# ----------------------------------------------------------------------------- SQL backend

_N, _S, _E = Newform.__table__, Space.__table__, Eigenvalue.__table__


def unit_done():
    """The orbit's unit is stored as done (a correlated EXISTS on the primary key of spaces).

    Written as a semi-join rather than a JOIN so that SQLite drives the search from
    the newforms indexes and looks each unit up by its key (a plain JOIN lets the
    planner start from spaces and rescan newforms once per unit).
    """
    return exists(
        select(_S.c.level).where(
            _S.c.level == _N.c.level,
            _S.c.weight == _N.c.weight,
            _S.c.char_index == _N.c.char_index,
            _S.c.status == STATUS_DONE,
        )
    )


def _sql_ranges(col, r: Ranges, integer: bool = True):
    conds = []
    for iv in r:
        lo, hi = _int_bounds(iv) if integer else iv
        if lo is not None and hi is not None and lo > hi:
            continue
        c = []
        if lo is not None:
            c.append(col >= lo)
        if hi is not None:
            c.append(col <= hi)
        conds.append(and_(*c) if c else true())
    return or_(*conds) if conds else false()


def _sql_unit_where(f: Filters) -> list:
    """Conditions on the orbit's unit (columns of spaces only)."""
    w = []
    if f.char_conductor:
        w.append(_sql_ranges(_S.c.char_conductor, f.char_conductor))
    if f.char_parity is not None:
        w.append(_S.c.char_parity == f.char_parity)
    return w


def _sql_where(f: Filters) -> list:
    w = []
    if f.level:
        w.append(_sql_ranges(_N.c.level, f.level))
    if f.weight:
        w.append(_sql_ranges(_N.c.weight, f.weight))
    if f.dim:
        w.append(_sql_ranges(_N.c.dim, f.dim))
    if f.rel_dim:
        w.append(_sql_ranges(_N.c.rel_dim, f.rel_dim))
    if f.char_order:
        w.append(_sql_ranges(_N.c.char_order, f.char_order))
    if f.char_index:
        w.append(_sql_ranges(_N.c.char_index, f.char_index))
    if f.trivial_char is not None:
        w.append(_N.c.char_order == 1 if f.trivial_char else _N.c.char_order > 1)
    unit = _sql_unit_where(f)
    if unit:
        w.append(
            exists(
                select(_S.c.level).where(
                    _S.c.level == _N.c.level,
                    _S.c.weight == _N.c.weight,
                    _S.c.char_index == _N.c.char_index,
                    *unit,
                )
            )
        )
    if f.rational is not None:
        w.append(_N.c.dim == 1 if f.rational else _N.c.dim > 1)
    if f.fricke is not None:
        w.append(_N.c.fricke_sign == f.fricke)
    if f.root_number is not None:
        w.append(_N.c.root_number == f.root_number)
    if f.al_pattern is not None:
        w.append(_N.c.al_pattern == f.al_pattern)
    for p, s in f.al.items():
        tok = f"{p}{'+' if s > 0 else '-'}"
        pat = _N.c.al_pattern
        w.append(or_(pat.like(tok + "%"), pat.like("%+" + tok + "%"), pat.like("%-" + tok + "%")))
    if f.cm is not None:
        w.append(_N.c.is_cm.is_(True) if f.cm else _N.c.is_cm.is_(False))
    if f.cm_disc is not None:
        w.append(_N.c.cm_disc == int(f.cm_disc))
    if f.lzero is not None:
        w.append(_N.c.lvalue_zero.is_(True) if f.lzero else _N.c.lvalue_zero.is_(False))
    if f.has_ap is not None:
        w.append(_N.c.has_ap.is_(True) if f.has_ap else _N.c.has_ap.is_(False))
    if f.labels is not None:
        w.append(_N.c.label.in_(f.labels))
    for n, r in f.trace:
        w.append(_sql_ranges(_N.c.traces[n - 1].as_integer(), r))
    if f.disc:  # loose numeric prefilter; the exact comparison is in Python
        conds = []
        for lo, hi in f.disc:
            col = cast(_N.c.field_disc, Numeric)
            c = []
            if lo is not None:
                c.append(col >= float(lo) - abs(float(lo)) * 1e-9 - 1)
            if hi is not None:
                c.append(col <= float(hi) + abs(float(hi)) * 1e-9 + 1)
            conds.append(and_(*c) if c else true())
        w.append(or_(*conds))
    for p, r in f.ap:
        rational = _sql_ranges(cast(_E.c.coords[0].as_string(), Integer), r)
        w.append(
            exists(
                select(_E.c.p).where(
                    _E.c.label == _N.c.label,
                    _E.c.p == p,
                    case((_N.c.dim == 1, rational), else_=true()),
                )
            )
        )
    return w


def _find_sql(src: Source, f: Filters, cols: list[str]) -> pd.DataFrame:
    sel = [_N.c[c] for c in cols]
    for n, _ in f.trace:
        sel.append(_N.c.traces[n - 1].as_integer().label(f"tr{n}"))
    q = (
        select(*sel)
        .where(unit_done(), *_sql_where(f))
        .order_by(_N.c.level, _N.c.weight, _N.c.char_index, _N.c.orbit)
    )
    with src.engine().connect() as conn:
        rows = conn.execute(q).mappings().all()
    return pd.DataFrame([dict(r) for r in rows], columns=[c.key for c in sel])


# ----------------------------------------------------------------------------- Parquet backend


def _ds_ranges(fld: ds.Expression, r: Ranges) -> ds.Expression:
    expr = None
    for iv in r:
        lo, hi = _int_bounds(iv)
        if lo is not None and hi is not None and lo > hi:
            continue
        e = None
        if lo is not None:
            e = fld >= lo
        if hi is not None:
            e = (fld <= hi) if e is None else e & (fld <= hi)
        if e is None:
            e = ds.scalar(True)
        expr = e if expr is None else expr | e
    return expr if expr is not None else ds.scalar(False)


def _ds_filter(f: Filters) -> ds.Expression | None:
    F = ds.field
    conds: list[ds.Expression] = []
    if f.level:
        conds.append(_ds_ranges(F("level"), f.level))
    if f.weight:
        conds.append(_ds_ranges(F("weight"), f.weight))
    if f.dim:
        conds.append(_ds_ranges(F("dim"), f.dim))
    if f.rel_dim:
        conds.append(_ds_ranges(F("rel_dim"), f.rel_dim))
    if f.char_order:
        conds.append(_ds_ranges(F("char_order"), f.char_order))
    if f.char_index:
        conds.append(_ds_ranges(F("char_index"), f.char_index))
    if f.trivial_char is not None:
        conds.append(F("char_order") == 1 if f.trivial_char else F("char_order") > 1)
    if f.rational is not None:
        conds.append(F("dim") == 1 if f.rational else F("dim") > 1)
    if f.fricke is not None:
        conds.append(F("fricke_sign") == f.fricke)
    if f.root_number is not None:
        conds.append(F("root_number") == f.root_number)
    if f.al_pattern is not None:
        conds.append(F("al_pattern") == f.al_pattern)
    if f.cm is not None:
        conds.append(F("is_cm") == bool(f.cm))
    if f.cm_disc is not None:
        conds.append(F("cm_disc") == int(f.cm_disc))
    if f.lzero is not None:
        conds.append(F("lvalue_zero") == bool(f.lzero))
    if f.has_ap is not None:
        conds.append(F("has_ap") == bool(f.has_ap))
    if f.labels is not None:
        conds.append(F("label").isin(f.labels))
    if f.ap:
        conds.append(F("has_ap") == True)  # noqa: E712 - an Arrow expression
    expr = None
    for c in conds:
        expr = c if expr is None else expr & c
    return expr


def _arrow_ranges_mask(values: pa.Array, r: Ranges) -> pa.Array:
    mask = None
    for iv in r:
        lo, hi = _int_bounds(iv)
        m = pa.scalar(True) if lo is None and hi is None else None
        if lo is not None:
            m = pc.greater_equal(values, lo)
        if hi is not None:
            m2 = pc.less_equal(values, hi)
            m = m2 if m is None else pc.and_(m, m2)
        mask = m if mask is None else pc.or_(mask, m)
    return pc.fill_null(mask, False)


def _traces(table: pa.Table) -> pa.Array:
    col = table["traces"]
    return col.combine_chunks() if col.num_chunks else pa.array([], col.type)


def _list_len(table: pa.Table) -> pa.Array:
    return pc.list_value_length(_traces(table))


def _list_at(table: pa.Table, i: int) -> pa.Array:
    if not table.num_rows:
        return pa.array([], pa.int64())
    return pc.list_element(_traces(table), i)


def _unit_key(table: pa.Table) -> pa.Array:
    """The key "level:weight:char_index" per row (for look-ups of the orbit's unit)."""
    parts = [pc.cast(table[c], pa.string()) for c in ("level", "weight", "char_index")]
    return pc.binary_join_element_wise(*parts, ":")


def _ds_unit_filter(f: Filters) -> ds.Expression | None:
    """Conditions on the unit (columns of the spaces dataset only)."""
    expr = None
    if f.char_conductor:
        expr = _ds_ranges(ds.field("char_conductor"), f.char_conductor)
    if f.char_parity is not None:
        e = ds.field("char_parity") == f.char_parity
        expr = e if expr is None else expr & e
    return expr


def _find_parquet(src: Source, f: Filters, cols: list[str]) -> pd.DataFrame:
    need = list(cols)
    for extra in ("al_pattern", "dim", "level", "weight", "char_index"):
        if extra not in need:
            need.append(extra)
    if f.trace and "traces" not in need:
        need.append("traces")
    table = src.dataset("newforms").to_table(columns=parquet_columns(need), filter=_ds_filter(f))
    unit_filter = _ds_unit_filter(f)
    if unit_filter is not None and table.num_rows:
        units = src.dataset("spaces").to_table(
            columns=["level", "weight", "char_index"], filter=unit_filter
        )
        table = table.filter(pc.is_in(_unit_key(table), value_set=_unit_key(units)))
    for p, s in f.al.items():
        table = table.filter(
            pc.fill_null(
                pc.match_substring_regex(table["al_pattern"], _al_token_regex(p, s)), False
            )
        )
    if f.trace and table.num_rows:
        longest = max(n for n, _ in f.trace)  # rows without Tr a_n cannot answer (extensions)
        table = table.filter(pc.fill_null(pc.greater_equal(_list_len(table), longest), False))
    if f.trace and table.num_rows:
        traces = _traces(table)
        mask = None
        for n, r in f.trace:
            m = _arrow_ranges_mask(pc.list_element(traces, n - 1), r)
            mask = m if mask is None else pc.and_(mask, m)
        table = table.filter(mask)
    trace_cols = {f"tr{n}": _list_at(table, n - 1) for n, _ in f.trace}
    df = arrow_newforms_to_pandas(table, cols)
    for name, values in trace_cols.items():
        df[name] = values.to_pylist()
    if len(df):
        df = df.sort_values(["level", "weight", "char_index", "orbit"], kind="stable")
    return df.reset_index(drop=True)


# ----------------------------------------------------------------------------- exact post-filter


def _fmt_ap(coords: list[str]) -> str:
    if len(coords) == 1 or all(Fraction(c) == 0 for c in coords[1:]):
        return str(Fraction(coords[0]))
    return "[" + ", ".join(str(c) for c in coords) + "]"


def _post_filter(src: Source, f: Filters, df: pd.DataFrame) -> pd.DataFrame:
    if not len(df):
        return df
    keep = np.ones(len(df), dtype=bool)
    if f.disc:
        keep &= np.array([d is not None and not (isinstance(d, float) and np.isnan(d))
                          and in_ranges(int(d), f.disc) for d in df["field_disc"]], dtype=bool)
    if f.ap:
        df = df[keep].copy()
        keep = np.ones(len(df), dtype=bool)
        primes = sorted({p for p, _ in f.ap})
        eig = src.eigenvalues(labels=list(df["label"]), primes=primes)
        coords = {(r.label, int(r.p)): list(r.coords) for r in eig.itertuples()}
        fields: dict[tuple, NumberField] = {}
        for p, r in f.ap:
            ok = []
            for label, poly in zip(df["label"], df["field_poly"], strict=True):
                c = coords.get((label, p))
                if c is None:
                    ok.append(False)
                    continue
                key = tuple(poly)
                K = fields.get(key)
                if K is None:
                    K = fields[key] = NumberField(list(poly))
                ok.append(_ap_matches(K, c, r))
            keep &= np.array(ok, dtype=bool)
        for p in primes:
            df[f"a{p}"] = [
                _fmt_ap(coords[(lab, p)]) if (lab, p) in coords else None for lab in df["label"]
            ]
    return df[keep]


def _ap_matches(K: NumberField, coords: list[str], r: Ranges) -> bool:
    a = K.element(coords)
    for lo, hi in r:
        if lo is not None and lo == hi:
            if K.rational_value(a) == lo:
                return True
        elif not K.is_totally_real():
            # a nontrivial character: a_p need not be real; only a rational a_p is decided
            q = K.rational_value(a)
            if q is not None and (lo is None or q >= lo) and (hi is None or q <= hi):
                return True
        elif K.all_in_interval(a, lo, hi):
            return True
    return False


# ----------------------------------------------------------------------------- entry point


def find(
    src: Source, filters: Filters, columns: str | list[str] = "default", with_traces: int = 0
) -> pd.DataFrame:
    """The orbits matching ``filters``, ordered by (level, weight, orbit).

    ``columns``: "default" (``DEFAULT_COLUMNS``), "all" (every newforms column),
    or a list of newforms columns. Columns ``tr<n>`` (Tr a_n) and ``a<p>`` (the
    exact a_p: an integer for rational orbits, else power-basis coordinates) are
    added for every trace / a_p condition; ``with_traces=K`` adds ``traces`` cut to
    Tr a_1..a_K.
    """
    if columns == "default":
        cols = list(DEFAULT_COLUMNS)
    elif columns == "all":
        cols = list(NEWFORM_COLUMNS)
    else:
        unknown = [c for c in columns if c not in NEWFORM_COLUMNS]
        if unknown:
            raise BadInput(WHERE, "columns", f"unknown columns {unknown}; known: {NEWFORM_COLUMNS}")
        cols = list(columns)
    for must in ("label", "field_poly", "field_disc", "level", "weight", "char_index", "orbit"):
        if must not in cols:
            cols.append(must)
    if with_traces and "traces" not in cols:
        cols.append("traces")
    df = _find_sql(src, filters, cols) if src.is_db else _find_parquet(src, filters, cols)
    df = _post_filter(src, filters, df)
    if with_traces and "traces" in df:
        df["traces"] = [list(t)[:with_traces] for t in df["traces"]]
    if isinstance(columns, str):
        base = DEFAULT_COLUMNS if columns == "default" else NEWFORM_COLUMNS
    else:
        base = list(columns)
    shown = list(base) + (["traces"] if with_traces and "traces" not in base else [])
    extra = [c for c in df.columns if c not in shown and c not in cols]
    return df[shown + extra].reset_index(drop=True)
