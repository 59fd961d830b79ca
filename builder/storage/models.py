"""The database schema (SQLAlchemy 2 declarative models), version ``SCHEMA_VERSION``.

Tables (documented column by column in schema/README.md; the DDL in
schema/tables.sql and schema/tables.sqlite.sql is generated from these models
by ``python -m builder.storage.models`` and kept in sync by tests/test_schema.py):

* ``meta``        key/value: ``schema_version``, ``params`` (the bounds of the db)
* ``runs``        one row per ``nfb run``: code version, parameters, host, times, status
* ``spaces``      one row per unit (N, k, χ): the character orbit (order, conductor,
                  parity, number, degree), dimensions, #orbits, Sturm bound, timing,
                  status, content hash, the bounds it was computed with
* ``newforms``    one row per Galois orbit, every field of ``NewformRecord`` (plus the
                  unit's ``char_order``, copied for searches without a join)
* ``eigenvalues`` exact a_p per orbit and prime p ≤ ap_bound (orbits of dim ≤ dim_cap)

Natural keys throughout: a unit is (level, weight, char_index), an orbit its
label, an eigenvalue (label, p). A unit is present in ``spaces`` with status
'done' only together with all its newforms and eigenvalues (one transaction).

Bump ``SCHEMA_VERSION`` on any change of tables or columns; an nfb of another
version refuses the database (see builder/storage/db.py) instead of guessing.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import (
    JSON,
    BigInteger,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    ForeignKeyConstraint,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

SCHEMA_VERSION = 4

STATUS_DONE = "done"
STATUS_FAILED = "failed"


class Base(DeclarativeBase):
    pass


class Meta(Base):
    __tablename__ = "meta"

    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    value: Mapped[str] = mapped_column(Text)


class Run(Base):
    __tablename__ = "runs"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    code_version: Mapped[str] = mapped_column(String(100))
    params: Mapped[dict] = mapped_column(JSON)
    job: Mapped[dict] = mapped_column(JSON)
    host: Mapped[str] = mapped_column(String(255))
    pid: Mapped[int] = mapped_column(Integer)
    started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True), nullable=True)
    # running | done | interrupted | failed | error   ('running' left behind = killed)
    status: Mapped[str] = mapped_column(String(16))
    units_planned: Mapped[int] = mapped_column(Integer)
    units_done: Mapped[int] = mapped_column(Integer, default=0)
    message: Mapped[str | None] = mapped_column(Text, nullable=True)


class Space(Base):
    __tablename__ = "spaces"

    level: Mapped[int] = mapped_column(Integer, primary_key=True)
    weight: Mapped[int] = mapped_column(Integer, primary_key=True)
    char_index: Mapped[int] = mapped_column(Integer, primary_key=True)
    # the character orbit of the unit (builder/characters.py); known for failed rows too
    char_order: Mapped[int] = mapped_column(Integer)
    char_conductor: Mapped[int] = mapped_column(Integer)
    char_parity: Mapped[int] = mapped_column(Integer)  # χ(−1) = ±1
    char_number: Mapped[int] = mapped_column(Integer)  # flint/Conrey number of the representative
    char_degree: Mapped[int] = mapped_column(Integer)  # [Q(χ):Q] = φ(char_order)
    status: Mapped[str] = mapped_column(String(16))  # done | failed
    dim_cusp: Mapped[int | None] = mapped_column(Integer, nullable=True)
    dim_new: Mapped[int | None] = mapped_column(Integer, nullable=True)
    dim_old: Mapped[int | None] = mapped_column(Integer, nullable=True)
    dim_eis: Mapped[int | None] = mapped_column(Integer, nullable=True)
    num_orbits: Mapped[int | None] = mapped_column(Integer, nullable=True)
    sturm_bound: Mapped[int | None] = mapped_column(Integer, nullable=True)
    seconds: Mapped[float] = mapped_column(Float)
    content_hash: Mapped[str | None] = mapped_column(String(64), nullable=True)
    params: Mapped[dict] = mapped_column(JSON)
    trace_bound: Mapped[int] = mapped_column(Integer)
    ap_bound: Mapped[int] = mapped_column(Integer)
    dim_cap: Mapped[int] = mapped_column(Integer)
    record_version: Mapped[int | None] = mapped_column(Integer, nullable=True)
    run_id: Mapped[int | None] = mapped_column(ForeignKey("runs.id"), nullable=True)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)

    __table_args__ = (
        Index("ix_spaces_weight_level", "weight", "level"),
        Index("ix_spaces_dim_new", "dim_new"),
        Index("ix_spaces_status", "status"),
        Index("ix_spaces_char_order", "char_order"),
    )


class Newform(Base):
    __tablename__ = "newforms"

    label: Mapped[str] = mapped_column(String(64), primary_key=True)
    level: Mapped[int] = mapped_column(Integer)
    weight: Mapped[int] = mapped_column(Integer)
    char_index: Mapped[int] = mapped_column(Integer)
    char_order: Mapped[int] = mapped_column(Integer)  # = spaces.char_order (denormalised)
    orbit: Mapped[int] = mapped_column(Integer)
    dim: Mapped[int] = mapped_column(Integer)  # [K_f : Q]
    rel_dim: Mapped[int] = mapped_column(Integer)  # [K_f : Q(χ)] = dim / char_degree
    # integer coefficients, constant first; [] for a new part split whole over Q(χ)
    field_poly: Mapped[list] = mapped_column(JSON)
    # decimal string (may exceed 64 bits); NULL above the unit's dim_cap
    field_disc: Mapped[str | None] = mapped_column(Text, nullable=True)
    traces: Mapped[list] = mapped_column(JSON)  # Tr a_n, n = 1..trace_bound
    al_primes: Mapped[list] = mapped_column(JSON)  # primes p | N, increasing
    al_signs: Mapped[list] = mapped_column(JSON)  # W_{p^e} eigenvalue for each, ±1
    al_pattern: Mapped[str] = mapped_column(String(255))  # e.g. "2-3+" ("" for N = 1)
    # NULL for a nontrivial character (W_N maps S_k(N, χ) to S_k(N, χ̄), Atkin–Li)
    fricke_sign: Mapped[int | None] = mapped_column(Integer, nullable=True)
    root_number: Mapped[int | None] = mapped_column(Integer, nullable=True)
    is_cm: Mapped[bool] = mapped_column(Boolean)
    cm_disc: Mapped[int | None] = mapped_column(BigInteger, nullable=True)
    lvalue_zero: Mapped[bool | None] = mapped_column(Boolean, nullable=True)  # None: not decided
    l_ratio: Mapped[str | None] = mapped_column(Text, nullable=True)
    hecke_poly_2: Mapped[list | None] = mapped_column(JSON, nullable=True)
    has_ap: Mapped[bool] = mapped_column(Boolean)  # exact a_p stored in eigenvalues
    # χ ≠ 1 with exact a_p: the primes p | N with χ trivial mod p, and the Atkin–Lehner
    # pseudo-eigenvalue w_{p^e} = p^(e(k/2−1))·λ_{p^e} of each (dim rationals, like coords)
    al_pseudo_primes: Mapped[list] = mapped_column(JSON)
    al_pseudo_values: Mapped[list | None] = mapped_column(JSON, nullable=True)

    __table_args__ = (
        ForeignKeyConstraint(
            ["level", "weight", "char_index"],
            ["spaces.level", "spaces.weight", "spaces.char_index"],
            ondelete="CASCADE",
        ),
        UniqueConstraint("level", "weight", "char_index", "orbit", name="uq_newforms_unit_orbit"),
        Index("ix_newforms_level_weight", "level", "weight"),
        Index("ix_newforms_weight_level", "weight", "level"),
        Index("ix_newforms_dim", "dim"),
        Index("ix_newforms_char_order", "char_order"),
        Index("ix_newforms_fricke_sign", "fricke_sign"),
        Index("ix_newforms_root_number", "root_number"),
        Index("ix_newforms_al_pattern", "al_pattern"),
        Index("ix_newforms_is_cm", "is_cm"),
    )


class Eigenvalue(Base):
    __tablename__ = "eigenvalues"

    label: Mapped[str] = mapped_column(
        ForeignKey("newforms.label", ondelete="CASCADE"), primary_key=True
    )
    p: Mapped[int] = mapped_column(Integer, primary_key=True)
    coords: Mapped[list] = mapped_column(JSON)  # dim rationals "p/q", power basis

    __table_args__ = (Index("ix_eigenvalues_p", "p"),)


TABLES = ("meta", "runs", "spaces", "newforms", "eigenvalues")


def ddl(dialect: str = "postgresql") -> str:
    """The CREATE TABLE / CREATE INDEX statements of the schema for one dialect."""
    from sqlalchemy.dialects import postgresql, sqlite
    from sqlalchemy.schema import CreateIndex, CreateTable

    d = {"postgresql": postgresql.dialect(), "sqlite": sqlite.dialect()}[dialect]
    parts: list[str] = []
    for name in TABLES:
        table = Base.metadata.tables[name]
        parts.append(str(CreateTable(table).compile(dialect=d)).strip() + ";")
        for index in sorted(table.indexes, key=lambda i: i.name or ""):
            parts.append(str(CreateIndex(index).compile(dialect=d)).strip() + ";")
    text = "\n\n".join(parts) + "\n"
    return "\n".join(line.rstrip() for line in text.splitlines()) + "\n"


DDL_HEADER = """\
-- nfb database schema, version {version}, {dialect} dialect.
-- GENERATED from builder/storage/models.py by `python -m builder.storage.models`;
-- do not edit by hand (tests/test_schema.py checks that it is in sync).
-- Column meanings: schema/README.md.

"""


def ddl_file_text(dialect: str) -> str:
    return DDL_HEADER.format(version=SCHEMA_VERSION, dialect=dialect) + ddl(dialect)


if __name__ == "__main__":  # regenerate schema/tables*.sql
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "schema"
    (root / "tables.sql").write_text(ddl_file_text("postgresql"))
    (root / "tables.sqlite.sql").write_text(ddl_file_text("sqlite"))
    print(f"wrote {root / 'tables.sql'} and {root / 'tables.sqlite.sql'}")
