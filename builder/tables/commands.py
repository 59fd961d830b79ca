"""The typer commands `nfb find`, `nfb sql`, `nfb verify`, `nfb report` (registered in cli.py).

Thin: parse the flags, open the source read-only (builder/tables/source.py), call
the library, print. Exit codes: 0 done (for verify: every check passed); 1 verify
found a failing record (or, with --strict, something it could not check); 2 bad
input — no table there, a malformed filter, or a statement that `nfb sql` refuses
because it would write.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import typer
from rich.console import Console
from rich.table import Table as RichTable

from builder.pipeline.errors import NfbError

# wide tables in pipes and logs too (rich would fall back to 80 columns)
out = Console(highlight=False, soft_wrap=True, width=None if sys.stdout.isatty() else 200)
err = Console(stderr=True, highlight=False, soft_wrap=True)

FORMATS = ("table", "csv", "json")
# what the rich table shows by default (CSV / JSON get every default column of find)
TABLE_COLUMNS = [
    "label",
    "level",
    "weight",
    "dim",
    "field_poly",
    "al_pattern",
    "fricke_sign",
    "root_number",
    "is_cm",
    "lvalue_zero",
]


def _fail(e: NfbError) -> None:
    print(f"nfb: error: {e}", file=sys.stderr, flush=True)
    raise typer.Exit(e.exit_code)


def _open(out_dir: Path | None, db: str | None, parquet: Path | None):
    from builder.tables.source import open_source

    return open_source(out_dir, db, parquet)


def _plain(v):
    """A DataFrame cell as a JSON-able Python value."""
    if v is None:
        return None
    if hasattr(v, "item") and not isinstance(v, list | tuple):  # numpy scalar
        v = v.item()
    if isinstance(v, float) and math.isnan(v):
        return None
    if isinstance(v, list | tuple):
        return [_plain(x) for x in v]
    if hasattr(v, "tolist"):
        return _plain(v.tolist())
    return v


def _text(v) -> str:
    v = _plain(v)
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, list):
        return json.dumps(v, separators=(",", ":"))
    return str(v)


def emit(df, fmt: str, limit: int | None, title: str | None = None) -> None:
    """Print a DataFrame as a rich table, CSV or JSON (records)."""
    if fmt not in FORMATS:
        from builder.pipeline.errors import BadInput

        raise BadInput("command line", "--format", f"expected one of {FORMATS}, got {fmt!r}")
    total = len(df)
    shown = df if not limit else df.head(limit)
    if fmt == "json":
        records = [
            {c: _plain(v) for c, v in zip(shown.columns, row, strict=True)}
            for row in shown.itertuples(index=False)
        ]
        print(json.dumps(records, indent=1, default=str))
        return
    if fmt == "csv":
        import csv

        w = csv.writer(sys.stdout, lineterminator="\n")
        w.writerow(list(shown.columns))
        for row in shown.itertuples(index=False):
            w.writerow([_text(v) if not isinstance(_plain(v), bool) else _plain(v) for v in row])
        return
    t = RichTable(*[str(c) for c in shown.columns], title=title)
    for row in shown.itertuples(index=False):
        t.add_row(*[_text(v) for v in row])
    out.print(t)
    more = f", showing the first {len(shown)} (--limit 0 for all)" if len(shown) < total else ""
    out.print(f"{total} row{'s' if total != 1 else ''}{more}")


# ----------------------------------------------------------------------------- options

OUT_OPT = typer.Option(
    None, "--out", help="Output directory of a run (its newforms.sqlite, else its parquet/)."
)
DB_OPT = typer.Option(None, "--db", help="Database URL (sqlite:///… or postgresql+psycopg://…).")
PARQUET_OPT = typer.Option(
    None, "--parquet", help="A Parquet export directory (OUT/parquet) instead of a database."
)
FORMAT_OPT = typer.Option("table", "--format", help="table | csv | json.")


def find_command(
    out_dir: Path | None = OUT_OPT,
    db: str | None = DB_OPT,
    parquet: Path | None = PARQUET_OPT,
    level: str | None = typer.Option(None, "--level", help='Levels: "37", "1-100", "..50".'),
    weight: str | None = typer.Option(None, "--weight", help='Weights: "2", "2,4".'),
    dim: str | None = typer.Option(
        None, "--dim", "--degree", help='Orbit dimension = degree of K_f: "1", "2..4".'
    ),
    disc: str | None = typer.Option(
        None, "--disc", help='Discriminant of the field polynomial: "5", "1..1000".'
    ),
    rational: bool | None = typer.Option(
        None, "--rational/--irrational", help="Only orbits of dimension 1 / above 1."
    ),
    fricke: str | None = typer.Option(None, "--fricke", help="Fricke sign: +1 or -1."),
    root_number: str | None = typer.Option(
        None, "--root-number", help="Sign of the functional equation: +1 or -1."
    ),
    al: list[str] = typer.Option(
        [], "--al", help="Atkin–Lehner signs PRIME:SIGN, e.g. 2:-1,5:+1 (p must divide N)."
    ),
    al_pattern: str | None = typer.Option(
        None, "--al-pattern", help='The whole sign pattern as stored, e.g. "2+3-5+".'
    ),
    ap: list[str] = typer.Option(
        [], "--ap", help="Exact a_p: P:VALUE or P:LO..HI (all real embeddings), e.g. 3:0, 2:-1..1."
    ),
    trace: list[str] = typer.Option(
        [], "--trace", help="Trace range N:LO..HI, e.g. 2:-2..2 (Tr a_2 in [-2, 2])."
    ),
    cm: bool | None = typer.Option(None, "--cm/--no-cm", help="With / without CM."),
    cm_disc: int | None = typer.Option(None, "--cm-disc", help="CM discriminant, e.g. -4."),
    lzero: bool | None = typer.Option(
        None, "--lzero/--no-lzero", help="L(f, k/2) = 0 / ≠ 0 (L(f,1) for weight 2)."
    ),
    has_ap: bool | None = typer.Option(
        None, "--has-ap/--no-has-ap", help="Exact eigenvalues stored / not stored."
    ),
    label: list[str] = typer.Option([], "--label", help="Only these labels (repeatable)."),
    char_order: str | None = typer.Option(
        None, "--char-order", help='Order of the character χ: "1" (trivial), "2..6".'
    ),
    char_index: str | None = typer.Option(
        None, "--char-index", help='Our index of χ\'s orbit at the level: "0" = trivial, "1-3".'
    ),
    trivial_char: bool | None = typer.Option(
        None, "--trivial-char/--nontrivial-char", help="Only the trivial / nontrivial characters."
    ),
    char_conductor: str | None = typer.Option(
        None, "--conductor", "--char-conductor", help='Conductor of χ: "4", "3..13".'
    ),
    char_parity: str | None = typer.Option(
        None, "--char-parity", help="χ(−1): +1 / even or -1 / odd."
    ),
    rel_dim: str | None = typer.Option(
        None, "--rel-dim", help='Relative dimension [K_f : Q(χ)]: "1", "2..4".'
    ),
    columns: str | None = typer.Option(
        None, "--columns", help="Comma-separated newforms columns to show (default: a summary)."
    ),
    with_traces: int = typer.Option(0, "--with-traces", help="Also show Tr a_1..a_K."),
    fmt: str = FORMAT_OPT,
    limit: int | None = typer.Option(
        None, "--limit", help="Rows to print (default 50 for a table, all for csv/json; 0 = all)."
    ),
) -> None:
    """Range search over newform orbits; a rich table, or CSV / JSON for scripts.

    Ranges: 5, 2..10, ..10, 2.. (and 2-10 for levels/weights/dims); commas join
    ranges. Repeat --trace / --ap / --al for several conditions (all must hold).
    Fricke, root number, Atkin–Lehner and L-value conditions never match orbits with
    a nontrivial character (those are not stored for them).
    Example: nfb find --out output/quickstart --weight 2 --al 2:-1,3:+1 --trace 5:-2..2
    """
    from builder.pipeline.errors import BadInput
    from builder.tables.find import (
        Filters,
        find,
        parse_al,
        parse_indexed,
        parse_parity,
        parse_ranges,
        parse_sign,
    )

    try:
        f = Filters()
        f.level = parse_ranges(level, "--level", signed=False) if level else None
        f.weight = parse_ranges(weight, "--weight", signed=False) if weight else None
        f.dim = parse_ranges(dim, "--dim", signed=False) if dim else None
        f.disc = parse_ranges(disc, "--disc") if disc else None
        f.rational = rational
        f.fricke = parse_sign(fricke, "--fricke") if fricke is not None else None
        f.root_number = parse_sign(root_number, "--root-number") if root_number else None
        for a in al:
            for p, s in parse_al(a).items():
                if f.al.get(p, s) != s:
                    raise BadInput("command line", "--al", f"two different signs for p = {p}")
                f.al[p] = s
        f.al_pattern = al_pattern
        for a in ap:
            f.ap.extend(parse_indexed(a, "--ap", prime=True, integer=False))
        for t in trace:
            f.trace.extend(parse_indexed(t, "--trace", prime=False))
        f.cm, f.cm_disc, f.lzero, f.has_ap = cm, cm_disc, lzero, has_ap
        f.labels = list(label) or None

        def unsigned(text: str | None, flag: str):
            return parse_ranges(text, flag, signed=False) if text else None

        f.char_order = unsigned(char_order, "--char-order")
        f.char_index = unsigned(char_index, "--char-index")
        f.trivial_char = trivial_char
        f.char_conductor = unsigned(char_conductor, "--conductor")
        f.char_parity = parse_parity(char_parity, "--char-parity") if char_parity else None
        f.rel_dim = unsigned(rel_dim, "--rel-dim")
        cols = "default" if not columns else [c.strip() for c in columns.split(",") if c.strip()]
        if limit is None:
            limit = 50 if fmt == "table" else 0
        with _open(out_dir, db, parquet) as src:
            df = find(src, f, columns=cols, with_traces=with_traces)
        if fmt == "table" and cols == "default":
            from builder.tables.find import DEFAULT_COLUMNS

            keep = TABLE_COLUMNS + (["field_disc"] if f.disc else [])
            df = df[keep + [c for c in df.columns if c not in DEFAULT_COLUMNS]]
        emit(df, fmt, limit, title=f"newforms: {f.describe()}" if fmt == "table" else None)
    except NfbError as e:
        _fail(e)


def sql_command(
    query: str = typer.Argument(..., help='One read-only statement, e.g. "SELECT …".'),
    out_dir: Path | None = OUT_OPT,
    db: str | None = DB_OPT,
    parquet: Path | None = PARQUET_OPT,
    fmt: str = FORMAT_OPT,
    limit: int | None = typer.Option(
        None, "--limit", help="Rows to print (default 200 for a table, all for csv/json)."
    ),
) -> None:
    """Run one read-only SQL statement (writes are refused, exit code 2).

    SQLite: opened read-only (mode=ro, query_only, an authorizer); PostgreSQL: a
    READ ONLY transaction, rolled back; a Parquet export: DuckDB, read-only.
    Tables: spaces, newforms, eigenvalues (schema/README.md).
    """
    from builder.tables.sql import run_sql

    try:
        if limit is None:
            limit = 200 if fmt == "table" else 0
        with _open(out_dir, db, parquet) as src:
            df = run_sql(src, query)
        emit(df, fmt, limit)
    except NfbError as e:
        _fail(e)


def verify_command(
    directory: Path | None = typer.Argument(
        None, metavar="[DIR]", help="Output directory of a run (default: output)."
    ),
    db: str | None = DB_OPT,
    parquet: Path | None = PARQUET_OPT,
    max_n: int = typer.Option(30, "--max-n", help="Trace formula for n ≤ this."),
    strict: bool = typer.Option(
        False, "--strict", help="Also fail (exit 1) when some record could not be checked."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print the whole result as JSON."),
    show_not_checked: bool = typer.Option(
        False, "--show-not-checked", help="List every record a check could not look at."
    ),
) -> None:
    """Re-check every stored space against formulas and identities, independently.

    Exit code: 0 every check passed; 1 some record failed (each is listed by
    label; with --strict also when something could not be checked); 2 bad input.
    """
    from builder.tables.verify import verify

    try:
        with _open(directory, db, parquet) as src:
            rep = verify(src, max_n=max_n)
    except NfbError as e:
        _fail(e)
    if as_json:
        print(json.dumps(rep.to_dict(), indent=1))
        raise typer.Exit(rep.exit_code(strict))
    out.print(f"verify {rep.source}: {rep.units} units, {rep.orbits} orbits, {rep.seconds:.1f}s")
    t = RichTable("check", "what", "records checked", "failed", "not checked", "status")
    for r in rep.results:
        style = {"FAILED": "bold red", "passed": "green"}.get(r.status, "yellow")
        t.add_row(
            r.name,
            r.description,
            str(len(r.checked)),
            str(len(r.failed_records)),
            str(len(r.not_checked)),
            f"[{style}]{r.status}[/{style}]",
        )
    out.print(t)
    for r in rep.results:
        for lab, detail in r.failures:
            out.print(f"[red]FAIL[/red] {r.name}: {lab}: {detail}", markup=True)
    for r in rep.results:
        if not r.not_checked:
            continue
        reasons: dict[str, list[str]] = {}
        for lab, why in r.not_checked:
            reasons.setdefault(why, []).append(lab)
        for why, labs in reasons.items():
            if show_not_checked or len(labs) <= 8:
                shown = ", ".join(labs)
            else:
                shown = ", ".join(labs[:8]) + f", … ({len(labs)} in all; --show-not-checked)"
            out.print(f"[yellow]not checked[/yellow] {r.name}: {why}: {shown}", markup=True)
    code = rep.exit_code(strict)
    if rep.ok:
        out.print(
            "[green]all checks passed[/green]"
            + ("" if rep.complete else " (some records could not be checked: see above)")
        )
    else:
        n = len({(c, lab) for c, lab, _ in rep.failures})
        out.print(f"[bold red]{n} failing record(s)[/bold red]; exit code {code}")
    raise typer.Exit(code)


def report_command(
    directory: Path | None = typer.Argument(
        None, metavar="[DIR]", help="Output directory of a run (default: output)."
    ),
    db: str | None = DB_OPT,
    parquet: Path | None = PARQUET_OPT,
    to: Path | None = typer.Option(
        None, "--to", help="HTML file to write (default DIR/report.html, or ./report.html)."
    ),
    title: str | None = typer.Option(None, "--title", help="Page title."),
) -> None:
    """Write one self-contained HTML page of plots and numbers about the table."""
    from builder.tables.report import REPORT_NAME, build_report

    try:
        with _open(directory, db, parquet) as src:
            if to is None:
                if src.kind == "sqlite":
                    to = Path(src.path).parent / REPORT_NAME
                elif src.kind == "parquet":
                    base = Path(src.path)
                    to = (base.parent if base.name == "parquet" else base) / REPORT_NAME
                else:
                    to = Path(REPORT_NAME)
            data = build_report(src, to, title=title)
    except NfbError as e:
        _fail(e)
    except OSError as e:
        print(f"nfb: error: cannot write {to}: {e.strerror or e}", file=sys.stderr)
        raise typer.Exit(3) from None
    out.print(f"{to}  ({len(data.images)} plots, {data.numbers['orbits']} orbits)")
