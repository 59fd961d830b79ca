"""Where a finished table is read from, always read-only.

Three kinds of source, chosen by ``open_source``:

* ``sqlite``      OUT/newforms.sqlite (or ``--db sqlite:///…``), opened with a
                  ``mode=ro`` URI and ``PRAGMA query_only`` — reading never writes;
* ``postgresql``  ``--db postgresql+psycopg://…``, read in read-only transactions;
* ``parquet``     the export OUT/parquet/{spaces,newforms,eigenvalues} (``--parquet``,
                  or OUT when it has an export but no database).

The loaders return pandas DataFrames with the *database* column set and types
(list columns as Python lists; the Parquet ``_text`` overflow twins folded back
into their list column), so every consumer sees the same frame whatever the
source. Only units with status 'done' are read, like the export.

Character columns (schema v3): ``spaces`` has char_order, char_conductor, char_parity,
char_number, char_degree after char_index; ``newforms`` has char_order (after char_index)
and rel_dim (after dim); fricke_sign / root_number are null (None / NaN in the frame)
for a nontrivial character.  Schema v4 adds al_pseudo_primes / al_pseudo_values (the
Atkin–Lehner pseudo-eigenvalues of character orbits with exact a_p) at the end.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
from sqlalchemy import Engine, create_engine, event, select
from sqlalchemy.engine import make_url

from builder.pipeline.errors import BadInput
from builder.storage.models import SCHEMA_VERSION, STATUS_DONE, Eigenvalue, Newform, Space

DB_NAME = "newforms.sqlite"
PARQUET_DIR = "parquet"
DATASETS = ("spaces", "newforms", "eigenvalues")

SPACE_COLUMNS = [
    "level",
    "weight",
    "char_index",
    "char_order",
    "char_conductor",
    "char_parity",
    "char_number",
    "char_degree",
    "dim_cusp",
    "dim_new",
    "dim_old",
    "dim_eis",
    "num_orbits",
    "sturm_bound",
    "seconds",
    "content_hash",
    "trace_bound",
    "ap_bound",
    "dim_cap",
]
NEWFORM_COLUMNS = [c.name for c in Newform.__table__.columns]
LIST_COLUMNS = ("traces", "field_poly", "hecke_poly_2", "al_primes", "al_signs",
                "al_pseudo_primes", "al_pseudo_values")
OVERFLOW_TWINS = ("traces", "field_poly", "hecke_poly_2")


def _json_loads(s):
    return None if s is None else json.loads(s)


def readonly_sqlite_engine(path: Path) -> Engine:
    """An engine on an existing SQLite file that cannot write to it.

    ``mode=ro`` opens the file read-only at the VFS level (no -journal, no
    writes; the WAL index is only read), and ``PRAGMA query_only`` refuses
    every statement that would change a database.
    """
    uri = f"sqlite:///file:{path.resolve()}?mode=ro&uri=true"
    engine = create_engine(uri, json_deserializer=_json_loads)

    @event.listens_for(engine, "connect")
    def _ro(dbapi_conn, _record):  # pragma: no cover - trivial
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA query_only = ON")
        cur.close()

    return engine


@dataclass
class Source:
    """A table to read: a database (SQLite/PostgreSQL) or a Parquet export."""

    kind: str  # "sqlite" | "postgresql" | "parquet"
    where: str  # for messages: a path or a redacted URL
    url: str | None = None
    path: Path | None = None  # the SQLite file, or the Parquet export root
    _engine: Engine | None = field(default=None, repr=False)

    # ------------------------------------------------------------------ engines
    @property
    def is_db(self) -> bool:
        return self.kind in ("sqlite", "postgresql")

    def engine(self) -> Engine:
        if not self.is_db:
            raise BadInput(self.where, None, "a Parquet export has no database engine")
        if self._engine is None:
            if self.kind == "sqlite":
                self._engine = readonly_sqlite_engine(self.path)
            else:
                from builder.storage.db import make_engine

                self._engine = make_engine(self.url).execution_options(postgresql_readonly=True)
        return self._engine

    def close(self) -> None:
        if self._engine is not None:
            self._engine.dispose()
            self._engine = None

    def __enter__(self) -> Source:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def dataset(self, name: str) -> ds.Dataset:
        return ds.dataset(str(self.path / name), format="parquet")

    # ------------------------------------------------------------------ loaders
    def spaces(self, weight: int | None = None) -> pd.DataFrame:
        """Done units: one row per (level, weight, char_index), sorted."""
        if self.is_db:
            S = Space.__table__
            q = select(*[S.c[c] for c in SPACE_COLUMNS]).where(S.c.status == STATUS_DONE)
            if weight is not None:
                q = q.where(S.c.weight == weight)
            q = q.order_by(S.c.weight, S.c.level, S.c.char_index)
            with self.engine().connect() as conn:
                rows = conn.execute(q).mappings().all()
            df = pd.DataFrame([dict(r) for r in rows], columns=SPACE_COLUMNS)
        else:
            flt = None if weight is None else ds.field("weight") == weight
            df = self.dataset("spaces").to_table(filter=flt).to_pandas()
            df = df.sort_values(["weight", "level", "char_index"], kind="stable")
        return df.reset_index(drop=True)

    def failed_units(self) -> pd.DataFrame:
        """Units stored with status 'failed' (database sources only; the export has none)."""
        cols = ["level", "weight", "char_index", "error"]
        if not self.is_db:
            return pd.DataFrame(columns=cols)
        S = Space.__table__
        q = select(*[S.c[c] for c in cols]).where(S.c.status != STATUS_DONE)
        with self.engine().connect() as conn:
            rows = conn.execute(q).mappings().all()
        return pd.DataFrame([dict(r) for r in rows], columns=cols)

    def newforms(self, columns: list[str] | None = None) -> pd.DataFrame:
        """Every orbit of a done unit, sorted by (weight, level, char_index, orbit)."""
        cols = list(columns or NEWFORM_COLUMNS)
        if self.is_db:
            from builder.tables.find import unit_done

            N = Newform.__table__
            q = (
                select(*[N.c[c] for c in cols])
                .where(unit_done())
                .order_by(N.c.weight, N.c.level, N.c.char_index, N.c.orbit)
            )
            with self.engine().connect() as conn:
                rows = conn.execute(q).mappings().all()
            df = pd.DataFrame([dict(r) for r in rows], columns=cols)
        else:
            table = self.dataset("newforms").to_table(columns=parquet_columns(cols))
            df = arrow_newforms_to_pandas(table, cols)
            df = df.sort_values(["weight", "level", "char_index", "orbit"], kind="stable")
        return df.reset_index(drop=True)

    def eigenvalues(
        self, labels: list[str] | None = None, primes: list[int] | None = None
    ) -> pd.DataFrame:
        """Exact a_p rows (label, level, weight, char_index, p, coords as rational strings)."""
        cols = ["label", "level", "weight", "char_index", "p", "coords"]
        if self.is_db:
            E, N = Eigenvalue.__table__, Newform.__table__
            from builder.tables.find import unit_done

            q = (
                select(E.c.label, N.c.level, N.c.weight, N.c.char_index, E.c.p, E.c.coords)
                .select_from(N.join(E, E.c.label == N.c.label))
                .where(unit_done())
            )
            if labels is not None:
                q = q.where(E.c.label.in_(list(labels)))
            if primes is not None:
                q = q.where(E.c.p.in_([int(p) for p in primes]))
            q = q.order_by(N.c.weight, N.c.level, N.c.char_index, N.c.orbit, E.c.p)
            with self.engine().connect() as conn:
                rows = conn.execute(q).mappings().all()
            df = pd.DataFrame([dict(r) for r in rows], columns=cols)
        else:
            flt = None
            if labels is not None:
                flt = ds.field("label").isin(list(labels))
            if primes is not None:
                e = ds.field("p").isin([int(p) for p in primes])
                flt = e if flt is None else flt & e
            table = self.dataset("eigenvalues").to_table(
                filter=flt,
                columns=["label", "level", "weight", "char_index", "orbit", "p", "coords"],
            )
            df = table.to_pandas()
            df = df.sort_values(["weight", "level", "char_index", "orbit", "p"], kind="stable")
            df["coords"] = [list(c) for c in df["coords"]]
            df = df[cols]
        return df.reset_index(drop=True)


def parquet_columns(cols: list[str]) -> list[str]:
    """The Parquet columns needed for these database columns (list + its _text twin)."""
    out = []
    for c in cols:
        out.append(c)
        if c in OVERFLOW_TWINS:
            out.append(c + "_text")
    return out


def arrow_newforms_to_pandas(table: pa.Table, cols: list[str]) -> pd.DataFrame:
    """Parquet newforms → the database frame: lists as Python lists, twins folded in."""
    data: dict[str, list] = {}
    names = set(table.column_names)
    for c in cols:
        if c in LIST_COLUMNS:
            values = table.column(c).to_pylist()
            if c + "_text" in names:
                twins = table.column(c + "_text").to_pylist()
                values = [
                    json.loads(t) if v is None and t is not None else v
                    for v, t in zip(values, twins, strict=True)
                ]
            data[c] = values
        else:
            data[c] = table.column(c).to_pylist()
    return pd.DataFrame(data, columns=cols)


def _check_parquet(root: Path, where: str) -> None:
    import pyarrow.parquet as pq

    for name in DATASETS:
        f = root / name / "part-0.parquet"
        if not f.exists():
            raise BadInput(
                where, None, f"no Parquet export here ({f} is missing; run `nfb export`)"
            )
    meta = pq.read_schema(root / "newforms" / "part-0.parquet").metadata or {}
    version = meta.get(b"nfb.schema_version")
    if version is not None and int(version) != SCHEMA_VERSION:
        raise BadInput(
            where,
            None,
            f"Parquet export of schema version {int(version)}, but this nfb reads version "
            f"{SCHEMA_VERSION}: use the nfb version that wrote it, or re-export",
        )


def open_source(
    out: str | Path | None = None, db: str | None = None, parquet: str | Path | None = None
) -> Source:
    """The table named by --db URL, --parquet DIR, or OUT (its SQLite file, else its export)."""
    from builder.storage.db import check_schema, redact, sqlite_path

    if db:
        try:
            u = make_url(db)
        except Exception as e:  # noqa: BLE001 - sqlalchemy raises ArgumentError
            raise BadInput("command line", "--db", f"not a database URL: {e}") from None
        backend = u.get_backend_name()
        if backend == "sqlite":
            path = sqlite_path(db)
            if path is None or not path.exists() or path.stat().st_size == 0:
                raise BadInput(str(path or db), None, "no nfb database here")
            src = Source("sqlite", str(path), url=db, path=path)
        elif backend == "postgresql":
            src = Source("postgresql", redact(db), url=db)
        else:
            raise BadInput("command line", "--db", f"unsupported database backend {backend!r}")
        try:
            check_schema(src.engine(), src.where)
        except BadInput:
            src.close()
            raise
        except Exception as e:  # noqa: BLE001 - connection errors of any driver
            src.close()
            raise BadInput(src.where, None, f"cannot read the database: {e}") from None
        return src
    if parquet:
        root = Path(parquet)
        _check_parquet(root, str(root))
        return Source("parquet", str(root), path=root)
    out = Path(out) if out else Path("output")
    if (out / DB_NAME).exists() and (out / DB_NAME).stat().st_size > 0:
        path = out / DB_NAME
        src = Source("sqlite", str(path), url=f"sqlite:///{path.resolve()}", path=path)
        try:
            check_schema(src.engine(), src.where)
        except BaseException:
            src.close()
            raise
        return src
    if (out / PARQUET_DIR / "newforms").exists():
        root = out / PARQUET_DIR
        _check_parquet(root, str(root))
        return Source("parquet", str(root), path=root)
    if (out / "newforms").exists() and (out / "spaces").exists():  # OUT is an export root
        _check_parquet(out, str(out))
        return Source("parquet", str(out), path=out)
    raise BadInput(
        str(out),
        None,
        "no nfb table here (no newforms.sqlite, no parquet/; pass --db or --parquet)",
    )
