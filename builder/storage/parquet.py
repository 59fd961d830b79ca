"""Deterministic Parquet export of a database (pyarrow).

Layout (one file per dataset, so `pandas.read_parquet(DIR)`, `pyarrow.dataset`
and DuckDB's `read_parquet('DIR/*.parquet')` all read it)::

    OUT/parquet/spaces/part-0.parquet
    OUT/parquet/newforms/part-0.parquet
    OUT/parquet/eigenvalues/part-0.parquet

Columns: ``SCHEMAS`` below, documented in schema/README.md (kept in sync by
tests/test_schema.py).

Determinism ("same bytes for the same data"): rows are sorted by their natural
key, written in row groups of exactly ``ROW_GROUP`` rows (the last one shorter),
with fixed compression, no pandas metadata and no timestamps — the only
key/value metadata is the dataset name and the schema version. Only units with
status 'done' are exported. The one column that is *measured* rather than
computed, ``spaces.seconds``, differs between two runs of the same job;
``export(..., timings=False)`` (``nfb export --no-timings``) writes it as null,
so that two builds of the same table give byte-identical files.

Integer lists (``traces``, ``field_poly``, ``hecke_poly_2``) are list<int64>.
If an entry does not fit in 64 bits the list column is null for that row and
the twin column ``<name>_text`` holds the exact list as JSON text (otherwise the
twin is null). Nothing is ever rounded.

Each file is written to a hidden temporary name and renamed into place after
all three are complete; on any error (e.g. a full disk) the temporaries are
removed and the previous export, if any, is left as it was.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
from sqlalchemy import Engine, select

from builder.pipeline.errors import StorageError
from builder.storage.models import SCHEMA_VERSION, STATUS_DONE, Eigenvalue, Newform, Space
from builder.storage.writer import describe_storage_error

ROW_GROUP = 4096
COMPRESSION = "zstd"
INT64_MIN, INT64_MAX = -(2**63), 2**63 - 1

I64 = pa.int64()
LIST_I64 = pa.list_(pa.int64())

SCHEMAS: dict[str, pa.Schema] = {
    "spaces": pa.schema(
        [
            ("level", I64),
            ("weight", I64),
            ("char_index", I64),
            ("char_order", I64),
            ("char_conductor", I64),
            ("char_parity", I64),
            ("char_number", I64),
            ("char_degree", I64),
            ("dim_cusp", I64),
            ("dim_new", I64),
            ("dim_old", I64),
            ("dim_eis", I64),
            ("num_orbits", I64),
            ("sturm_bound", I64),
            ("seconds", pa.float64()),
            ("content_hash", pa.string()),
            ("trace_bound", I64),
            ("ap_bound", I64),
            ("dim_cap", I64),
        ]
    ),
    "newforms": pa.schema(
        [
            ("label", pa.string()),
            ("level", I64),
            ("weight", I64),
            ("char_index", I64),
            ("char_order", I64),
            ("orbit", I64),
            ("dim", I64),
            ("rel_dim", I64),
            ("traces", LIST_I64),
            ("traces_text", pa.string()),
            ("fricke_sign", I64),
            ("root_number", I64),
            ("al_primes", LIST_I64),
            ("al_signs", LIST_I64),
            ("al_pattern", pa.string()),
            ("field_poly", LIST_I64),
            ("field_poly_text", pa.string()),
            ("field_disc", pa.string()),
            ("is_cm", pa.bool_()),
            ("cm_disc", I64),
            ("lvalue_zero", pa.bool_()),
            ("l_ratio", pa.string()),
            ("hecke_poly_2", LIST_I64),
            ("hecke_poly_2_text", pa.string()),
            ("has_ap", pa.bool_()),
            ("al_pseudo_primes", LIST_I64),
            ("al_pseudo_values", pa.list_(pa.list_(pa.string()))),
        ]
    ),
    "eigenvalues": pa.schema(
        [
            ("label", pa.string()),
            ("level", I64),
            ("weight", I64),
            ("char_index", I64),
            ("orbit", I64),
            ("p", I64),
            ("coords", pa.list_(pa.string())),
        ]
    ),
}
DATASETS = tuple(SCHEMAS)
FILE_NAME = "part-0.parquet"


@dataclass
class ExportResult:
    root: Path
    rows: dict[str, int]

    def paths(self) -> dict[str, Path]:
        return {name: self.root / name / FILE_NAME for name in DATASETS}


def _fits(values: list[int]) -> bool:
    return not values or (min(values) >= INT64_MIN and max(values) <= INT64_MAX)


def _split_int_list(values: list[int] | None) -> tuple[list[int] | None, str | None]:
    if values is None:
        return None, None
    if _fits(values):
        return values, None
    return None, json.dumps([int(v) for v in values], separators=(",", ":"))


_S, _N, _E = Space.__table__, Newform.__table__, Eigenvalue.__table__


def _space_rows(conn, timings: bool):
    q = (
        select(_S)
        .where(_S.c.status == STATUS_DONE)
        .order_by(_S.c.weight, _S.c.level, _S.c.char_index)
    )
    for r in conn.execute(q).mappings():
        yield {
            **{c: r[c] for c in SCHEMAS["spaces"].names if c != "seconds"},
            "seconds": float(r["seconds"]) if timings else None,
        }


def _newform_rows(conn):
    q = (
        select(_N)
        .join(
            _S,
            (_S.c.level == _N.c.level)
            & (_S.c.weight == _N.c.weight)
            & (_S.c.char_index == _N.c.char_index),
        )
        .where(_S.c.status == STATUS_DONE)
        .order_by(_N.c.weight, _N.c.level, _N.c.char_index, _N.c.orbit)
    )
    for r in conn.execution_options(yield_per=ROW_GROUP).execute(q).mappings():
        row = dict(r)
        for name in ("traces", "field_poly", "hecke_poly_2"):
            row[name], row[name + "_text"] = _split_int_list(row[name])
        row["is_cm"] = bool(row["is_cm"])
        if row["lvalue_zero"] is not None:
            row["lvalue_zero"] = bool(row["lvalue_zero"])
        row["has_ap"] = bool(row["has_ap"])
        yield row


def _eigen_rows(conn):
    q = (
        select(
            _E.c.label,
            _N.c.level,
            _N.c.weight,
            _N.c.char_index,
            _N.c.orbit,
            _E.c.p,
            _E.c.coords,
        )
        .join(_N, _N.c.label == _E.c.label)
        .join(
            _S,
            (_S.c.level == _N.c.level)
            & (_S.c.weight == _N.c.weight)
            & (_S.c.char_index == _N.c.char_index),
        )
        .where(_S.c.status == STATUS_DONE)
        .order_by(_N.c.weight, _N.c.level, _N.c.char_index, _N.c.orbit, _E.c.p)
    )
    for r in conn.execution_options(yield_per=ROW_GROUP * 8).execute(q).mappings():
        yield dict(r)


def _write_dataset(path: Path, name: str, rows) -> int:
    schema = SCHEMAS[name].with_metadata(
        {"nfb.dataset": name, "nfb.schema_version": str(SCHEMA_VERSION)}
    )
    n = 0
    with pq.ParquetWriter(
        path,
        schema,
        compression=COMPRESSION,
        write_statistics=True,
        use_dictionary=True,
        store_schema=True,
    ) as writer:
        batch: list[dict] = []

        def flush() -> None:
            table = pa.Table.from_pylist(batch, schema=schema)
            writer.write_table(table, row_group_size=ROW_GROUP)

        for row in rows:
            batch.append(row)
            if len(batch) == ROW_GROUP:
                flush()
                n += len(batch)
                batch = []
        if batch or n == 0:
            flush()
            n += len(batch)
    return n


def export(engine: Engine, root: str | os.PathLike, timings: bool = True) -> ExportResult:
    """Write OUT/parquet/{spaces,newforms,eigenvalues}/part-0.parquet from the database."""
    root = Path(root)
    tmp_paths: dict[str, Path] = {}
    rows: dict[str, int] = {}
    try:
        for name in DATASETS:
            (root / name).mkdir(parents=True, exist_ok=True)
            tmp_paths[name] = root / name / f".{FILE_NAME}.tmp-{os.getpid()}"
        with engine.connect() as conn:
            rows["spaces"] = _write_dataset(
                tmp_paths["spaces"], "spaces", _space_rows(conn, timings)
            )
            rows["newforms"] = _write_dataset(
                tmp_paths["newforms"], "newforms", _newform_rows(conn)
            )
            rows["eigenvalues"] = _write_dataset(
                tmp_paths["eigenvalues"], "eigenvalues", _eigen_rows(conn)
            )
        for name in DATASETS:
            os.replace(tmp_paths[name], root / name / FILE_NAME)
    except OSError as e:
        raise StorageError(
            f"writing the Parquet export under {root} failed: {describe_storage_error(e)}; "
            "the database is intact — fix the cause and run `nfb export`"
        ) from e
    finally:
        for p in tmp_paths.values():
            try:
                p.unlink()
            except OSError:
                pass
    return ExportResult(root, rows)
