"""schema/ documents exactly what the code writes (DDL and Parquet columns)."""

from __future__ import annotations

import re
from pathlib import Path

from builder.storage.models import SCHEMA_VERSION, TABLES, Base, ddl_file_text
from builder.storage.parquet import SCHEMAS

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "schema" / "README.md"


def documented(kind: str) -> dict[str, dict[str, str]]:
    """{name: {column: type}} from the '### table `x`' / '### dataset `x`' sections."""
    out: dict[str, dict[str, str]] = {}
    current = None
    for line in README.read_text().splitlines():
        m = re.match(r"^###\s+(table|dataset)\s+`(\w+)`", line)
        if m:
            current = m.group(2) if m.group(1) == kind else None
            if current:
                out[current] = {}
            continue
        if line.startswith("#"):
            current = None
        if current and line.startswith("| `"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            out[current][cells[0].strip("`")] = cells[1].strip("`")
    return out


def test_ddl_files_in_sync():
    for dialect, name in (("postgresql", "tables.sql"), ("sqlite", "tables.sqlite.sql")):
        text = (ROOT / "schema" / name).read_text()
        assert text == ddl_file_text(dialect), (
            f"schema/{name} is stale: run `python -m builder.storage.models`"
        )


def test_readme_documents_every_table_column():
    doc = documented("table")
    assert set(doc) == set(TABLES)
    for name in TABLES:
        cols = [c.name for c in Base.metadata.tables[name].columns]
        assert list(doc[name]) == cols, name


def test_readme_documents_every_parquet_column():
    doc = documented("dataset")
    assert set(doc) == set(SCHEMAS)
    for name, schema in SCHEMAS.items():
        assert list(doc[name]) == schema.names, name
        for f in schema:
            assert doc[name][f.name] == str(f.type), (name, f.name)


def test_readme_states_the_schema_version():
    assert f"Schema version: **{SCHEMA_VERSION}**" in README.read_text()


def test_character_columns_in_place():
    """Schema 3: the character of a unit right after char_index, rel_dim after dim, and
    the Fricke sign / root number nullable (absent for a nontrivial character)."""
    char = ["char_order", "char_conductor", "char_parity", "char_number", "char_degree"]
    spaces = Base.metadata.tables["spaces"]
    cols = [c.name for c in spaces.columns]
    i = cols.index("char_index")
    assert cols[i + 1 : i + 6] == char
    assert not any(spaces.c[c].nullable for c in char)
    newforms = Base.metadata.tables["newforms"]
    cols = [c.name for c in newforms.columns]
    assert cols[cols.index("char_index") + 1] == "char_order"
    assert cols[cols.index("dim") + 1] == "rel_dim"
    assert not newforms.c.rel_dim.nullable and not newforms.c.char_order.nullable
    assert newforms.c.fricke_sign.nullable and newforms.c.root_number.nullable
    names = SCHEMAS["spaces"].names
    assert names[names.index("char_index") + 1 : names.index("char_index") + 6] == char
    names = SCHEMAS["newforms"].names
    assert names[names.index("char_index") + 1] == "char_order"
    assert names[names.index("dim") + 1] == "rel_dim"
    text = README.read_text()
    assert "the only one for now" not in text and "`13w2c4-1`" in text
