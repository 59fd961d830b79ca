"""A finished table as pandas DataFrames.

    from builder.tables.api import Table

    t = Table("output/quickstart")             # its SQLite file (or its Parquet export)
    t = Table(db="postgresql+psycopg://…")      # a PostgreSQL table
    t = Table(parquet="output/quickstart/parquet")

    t.spaces(weight=4)                          # one row per done unit
    t.newforms(level=(30, 60), weight=2, rational=True, root_number=-1)
    t.newforms(al={2: -1, 3: +1}, trace={5: (-2, 2)}, ap={7: 0})
    t.newforms(char_order=(2, None), char_parity=-1)   # nontrivial odd characters
    t.eigenvalues(["37w2-1"], primes=[2, 3, 5])
    t.sql("SELECT al_pattern, count(*) FROM newforms GROUP BY 1")   # read-only
    t.duckdb()                                  # DuckDB views on the Parquet export

``newforms`` takes the filters of `nfb find` as keywords (builder/tables/find.py:
ranges as a number, a (lo, hi) tuple with None for an open end, or the CLI
strings "1-100", "-2..2"), and returns every newforms column (list columns as
Python lists) plus ``tr<n>`` / ``a<p>`` for the trace and a_p conditions.
Every read is read-only (builder/tables/source.py, builder/tables/sql.py).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from builder.tables.find import Filters, find
from builder.tables.source import Source, open_source
from builder.tables.sql import duckdb_views, run_sql


class Table:
    """A read-only view of one nfb table (SQLite, PostgreSQL or the Parquet export)."""

    def __init__(
        self,
        where: str | Path | None = None,
        *,
        db: str | None = None,
        parquet: str | Path | None = None,
    ) -> None:
        if where is not None and db is None and parquet is None and "://" in str(where):
            db, where = str(where), None
        self.source: Source = open_source(where, db, parquet)

    def __repr__(self) -> str:
        return f"Table({self.source.kind}: {self.source.where})"

    def close(self) -> None:
        self.source.close()

    def __enter__(self) -> Table:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ data
    def spaces(self, weight: int | None = None, level=None, char_order=None) -> pd.DataFrame:
        """Done units: character, dimensions, number of orbits, Sturm bound, seconds, bounds.

        ``level`` and ``char_order`` take ranges like the filters of ``newforms``.
        """
        df = self.source.spaces(weight)
        f = Filters.from_kwargs(level=level, char_order=char_order)
        from builder.tables.find import in_ranges

        for name in ("level", "char_order"):
            r = getattr(f, name)
            if r is not None:
                keep = pd.Series([in_ranges(int(n), r) for n in df[name]], index=df.index,
                                 dtype=bool)  # fmt: skip
                df = df[keep].reset_index(drop=True)
        return df

    def newforms(self, columns: str | list[str] = "all", **filters) -> pd.DataFrame:
        """Orbits matching the filters (see builder/tables/find.py), by (level, weight, orbit)."""
        return find(self.source, Filters.from_kwargs(**filters), columns=columns)

    def eigenvalues(self, labels=None, primes=None) -> pd.DataFrame:
        """Exact a_p: label, level, weight, p, coords (power-basis rationals as strings)."""
        if isinstance(labels, str):
            labels = [labels]
        return self.source.eigenvalues(labels, primes)

    def sql(self, query: str, limit: int | None = None) -> pd.DataFrame:
        """One read-only SQL statement (SQLite / PostgreSQL; DuckDB on a Parquet export)."""
        return run_sql(self.source, query, limit)

    def duckdb(self, parquet: str | Path | None = None):
        """A DuckDB connection with views spaces / newforms / eigenvalues on the export.

        Needs the Parquet export: this table's own, or ``parquet`` (default
        OUT/parquet beside the SQLite file).
        """
        if parquet is None:
            if self.source.kind == "parquet":
                parquet = self.source.path
            elif self.source.kind == "sqlite":
                parquet = Path(self.source.path).parent / "parquet"
            else:
                raise ValueError("pass parquet=DIR: a PostgreSQL table has no export beside it")
        return duckdb_views(Path(parquet))
