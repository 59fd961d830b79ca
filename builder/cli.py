"""`nfb`: the command-line face of the builder (a thin layer over builder.pipeline).

Exit codes: 0 done; 2 bad input (nothing written); 3 environment error (disk
full, database unreachable — what was committed is intact, rerun to resume);
130 interrupted by Ctrl-C (143 by SIGTERM), resumable; anything else is a bug.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import typer
from rich.console import Console
from rich.table import Table

from builder.pipeline.errors import BadInput, Interrupted, NfbError
from builder.tables.commands import find_command, report_command, sql_command, verify_command

app = typer.Typer(
    name="nfb",
    help=(
        "Build exact newform tables for Γ0(N): plan, run, resume and extend jobs, "
        "store them in SQLite or PostgreSQL, export Parquet.\n\n"
        "Exit codes: 0 done, 2 bad input (nothing written), 3 environment error "
        "(disk full, database unreachable; the database is intact), 130 interrupted "
        "(rerun to resume), other = bug."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

err = Console(stderr=True, highlight=False, soft_wrap=True)
out = Console(highlight=False, soft_wrap=True)


def _fail(e: BaseException) -> None:
    if isinstance(e, Interrupted):
        raise typer.Exit(e.exit_code)
    if isinstance(e, NfbError):
        print(f"nfb: error: {e}", file=sys.stderr, flush=True)
        raise typer.Exit(e.exit_code)
    raise e


def _target(out_dir: Path | None, db: str | None, job_file: Path | None = None):
    """The job (for status with a job file) or a minimal one naming the database."""
    from builder.pipeline.jobs import load_job

    overrides = {"out": str(out_dir) if out_dir else None, "db": db}
    if job_file is not None:
        return load_job(job_file, overrides)
    return load_job(None, {"levels": "1", "weights": "2", **overrides})


def _sigint_to_interrupted() -> None:
    """From the start of a command, Ctrl-C means a clean stop with exit code 130."""
    import signal

    def handler(signum, _frame):
        raise Interrupted(signum)

    signal.signal(signal.SIGINT, handler)
    signal.signal(signal.SIGTERM, handler)


@app.command()
def run(
    job_file: Path | None = typer.Argument(
        None, metavar="[JOB.toml]", help="Job file (TOML); flags override its keys."
    ),
    levels: str | None = typer.Option(None, "--levels", help='Levels: "1-100", "37", "1-50,77".'),
    weights: str | None = typer.Option(
        None, "--weights", help='Weights: "2,4" (odd ones need --characters other than trivial).'
    ),
    characters: str | None = typer.Option(
        None,
        "--characters",
        help='Characters χ mod N: trivial (default), all, "order:1,2" or "index:0,3"; '
        "only those with χ(−1) = (−1)^k are computed.",
    ),
    out_dir: Path | None = typer.Option(
        None, "--out", help="Output directory (log, newforms.sqlite, parquet/). Default: output"
    ),
    db: str | None = typer.Option(
        None, "--db", help="Database URL, e.g. postgresql+psycopg://user@host/db."
    ),
    workers: int | None = typer.Option(
        None, "--workers", help="Local worker processes (1 = serial)."
    ),
    dask: str | None = typer.Option(
        None, "--dask", help="Run on a Dask cluster: tcp://HOST:PORT of its scheduler."
    ),
    trace_bound: int | None = typer.Option(
        None, "--trace-bound", help="Store Tr a_n for n ≤ this (default 1000)."
    ),
    ap_bound: int | None = typer.Option(
        None, "--ap-bound", help="Exact a_p for primes p ≤ this (default 100)."
    ),
    dim_cap: int | None = typer.Option(
        None, "--dim-cap", help="... for orbits of dimension ≤ this (default 20)."
    ),
    dry_run: bool = typer.Option(
        False, "--dry-run", help="Print the plan and a time estimate; compute nothing."
    ),
    extend: bool = typer.Option(
        False, "--extend", help="Allow larger bounds than the existing database has."
    ),
    progress: str = typer.Option(
        "auto", "--progress", help="auto | bar | lines | none.", show_default=True
    ),
) -> None:
    """Compute every unit (N, k, χ) of the job not yet in the database; resume or extend."""
    _sigint_to_interrupted()
    from builder.pipeline.jobs import load_job
    from builder.pipeline.run import run_job

    overrides = {
        "levels": levels,
        "weights": weights,
        "characters": characters,
        "out": str(out_dir) if out_dir is not None else None,
        "db": db,
        "workers": workers,
        "dask": dask,
        "trace_bound": trace_bound,
        "ap_bound": ap_bound,
        "dim_cap": dim_cap,
    }
    if progress not in ("auto", "bar", "lines", "none"):
        _fail(
            BadInput(
                "command line", "--progress", f"expected auto|bar|lines|none, got {progress!r}"
            )
        )
    try:
        job = load_job(job_file, overrides)
        run_job(job, extend=extend, dry_run=dry_run, progress=progress, console=err)
    except (NfbError, Interrupted) as e:
        _fail(e)


@app.command()
def status(
    job_file: Path | None = typer.Argument(
        None, metavar="[JOB.toml]", help="Also show what this job still needs."
    ),
    out_dir: Path | None = typer.Option(None, "--out", help="Output directory of a run."),
    db: str | None = typer.Option(None, "--db", help="Database URL (default OUT/newforms.sqlite)."),
) -> None:
    """Show what a database holds: units per weight, bounds, recent runs."""
    from builder.pipeline.jobs import compress_levels
    from builder.pipeline.progress import fmt_seconds
    from builder.pipeline.run import plan_job
    from builder.storage.db import open_existing, redact
    from builder.storage.reader import summary

    try:
        job = _target(out_dir, db, job_file)
        engine, meta = open_existing(job.db_url)
        try:
            s = summary(engine)
        finally:
            engine.dispose()
        out.print(f"database {redact(job.db_url)} (schema version {meta.get('schema_version')})")
        out.print(f"bounds {meta.get('params')}")
        t = Table("weight", "status", "units", "levels", "orbits", "compute")
        for weight, st, n, lo, hi, secs, orbits in s["per_weight"]:
            t.add_row(
                str(weight), st, str(n), f"{lo}-{hi}", str(orbits or 0), fmt_seconds(secs or 0)
            )
        out.print(t)
        out.print(f"{s['newforms']} newform orbits, {s['eigenvalues']} exact eigenvalues")
        if len(s["param_sets"]) > 1:
            out.print(
                "[yellow]units with several bound sets (an extension in progress):[/yellow] "
                + "; ".join(
                    f"trace_bound={a} ap_bound={b} dim_cap={c}: {n}"
                    for a, b, c, n in s["param_sets"]
                )
            )
        if s["runs"]:
            r = Table("run", "status", "started", "finished", "units", "host", "code")
            for run_ in s["runs"]:
                r.add_row(
                    str(run_["id"]),
                    run_["status"] + (" (killed?)" if run_["status"] == "running" else ""),
                    str(run_["started_at"])[:19],
                    str(run_["finished_at"] or "")[:19],
                    f"{run_['units_done']}/{run_['units_planned']}",
                    run_["host"],
                    run_["code_version"],
                )
            out.print(r)
        if job_file is not None:
            plan = plan_job(job, extend=True)
            missing = plan.todo
            chars = "" if job.characters.is_trivial else f" (characters {job.characters.spec})"
            nontrivial = sum(1 for u in missing if u[2])
            out.print(
                f"job {job_file}{chars}: {plan.skipped} units done, {len(missing)} to compute"
                + (
                    f" (levels {compress_levels(sorted({u[0] for u in missing}))}"
                    + (f"; {nontrivial} with a nontrivial character" if nontrivial else "")
                    + ")"
                    if missing
                    else ""
                ),
                markup=False,
            )
    except (NfbError, Interrupted) as e:
        _fail(e)


@app.command()
def export(
    out_dir: Path | None = typer.Option(None, "--out", help="Output directory of a run."),
    db: str | None = typer.Option(None, "--db", help="Database URL (default OUT/newforms.sqlite)."),
    to: Path | None = typer.Option(None, "--to", help="Export directory (default OUT/parquet)."),
    timings: bool = typer.Option(
        True,
        "--timings/--no-timings",
        help="--no-timings writes spaces.seconds as null: byte-identical files for the same table.",
    ),
) -> None:
    """Write the Parquet export (spaces, newforms, eigenvalues) from the database."""
    from builder.storage.db import open_existing
    from builder.storage.parquet import export as do_export

    try:
        job = _target(out_dir, db)
        engine, _ = open_existing(job.db_url)
        try:
            res = do_export(engine, to or job.out / "parquet", timings=timings)
        finally:
            engine.dispose()
        for name, path in res.paths().items():
            out.print(f"{path}  ({res.rows[name]} rows)")
    except (NfbError, Interrupted) as e:
        _fail(e)


@app.command()
def show(
    label: str = typer.Argument(..., help="A newform label, e.g. 37w2-1."),
    out_dir: Path | None = typer.Option(None, "--out", help="Output directory of a run."),
    db: str | None = typer.Option(None, "--db", help="Database URL (default OUT/newforms.sqlite)."),
    as_json: bool = typer.Option(False, "--json", help="Print the stored row as JSON."),
    n_traces: int = typer.Option(20, "--traces", help="How many traces to print."),
) -> None:
    """Print one newform orbit: field, signs, traces, exact a_p."""
    from builder.arith import factor
    from builder.storage.db import open_existing
    from builder.storage.reader import load_newform, similar_labels

    try:
        job = _target(out_dir, db)
        engine, _ = open_existing(job.db_url)
        try:
            found = load_newform(engine, label)
            if found is None:
                near = similar_labels(engine, label)
                hint = f" (in that space: {', '.join(near)})" if near else ""
                raise BadInput(
                    "command line", "LABEL", f"no newform {label!r} in the database{hint}"
                )
        finally:
            engine.dispose()
        nf, space, eigen = found
        if as_json:
            doc = {**nf, "space": space, "eigenvalues": {e["p"]: e["coords"] for e in eigen}}
            print(json.dumps(doc, default=str, indent=1))
            return
        out.print(
            f"[bold]{nf['label']}[/bold]  level {nf['level']}, weight {nf['weight']}, "
            f"orbit {nf['orbit']}"
        )
        if nf["char_index"]:
            out.print(
                f"  character orbit {nf['char_index']}: order {space['char_order']}, "
                f"conductor {space['char_conductor']}, "
                f"{'even' if space['char_parity'] > 0 else 'odd'}, representative number "
                f"{space['char_number']}; relative dimension over Q(χ) {nf['rel_dim']}"
            )
        poly = nf["field_poly"] or "not lifted (the new part is one orbit, irreducible over Q(χ))"
        out.print(f"  dimension {nf['dim']}; field polynomial (constant first) {poly}")
        disc = nf["field_disc"] if nf["field_disc"] is not None else "(not kept: dim > dim_cap)"
        out.print(f"  field discriminant {disc}")
        pairs = zip(nf["al_primes"], nf["al_signs"], strict=True)
        signs = ", ".join(f"W_{p}: {'+' if s > 0 else '-'}1" for p, s in pairs)
        if nf["fricke_sign"] is None:
            out.print("  Atkin–Lehner signs, Fricke, root number: not defined for a nontrivial χ")
            pseudo = zip(nf.get("al_pseudo_primes") or [], nf.get("al_pseudo_values") or [],
                         strict=True)
            for p, coords in pseudo:
                Q = p ** dict(factor(nf["level"]))[p]
                out.print(f"  W_{Q} pseudo-eigenvalue w = {Q}^(k/2−1)·λ (power basis): {coords}",
                          markup=False)
        else:
            out.print(
                f"  Atkin–Lehner {signs or '(none)'}; Fricke {nf['fricke_sign']:+d}; "
                f"root number {nf['root_number']:+d}"
            )
        cm = f"yes, discriminant {nf['cm_disc']}" if nf["is_cm"] else "no"
        out.print(
            f"  CM: {cm}; L-value zero: {nf['lvalue_zero']}; L-ratio {nf['l_ratio']}",
            markup=False,
        )
        tr = nf["traces"][:n_traces]
        out.print(f"  traces Tr a_n, n = 1..{len(tr)}: {tr}")
        if eigen:
            out.print("  exact a_p (power basis of a root of the field polynomial):")
            for e in eigen[:25]:
                out.print(f"    a_{e['p']} = {e['coords']}")
            if len(eigen) > 25:
                out.print(f"    … {len(eigen) - 25} more (use --json)")
        elif not nf["has_ap"]:
            out.print("  exact a_p not stored (dimension above dim_cap)")
    except (NfbError, Interrupted) as e:
        _fail(e)


app.command("find")(find_command)
app.command("sql")(sql_command)
app.command("verify")(verify_command)
app.command("report")(report_command)


def main() -> None:  # pragma: no cover
    try:
        app()
    except KeyboardInterrupt:
        sys.exit(130)


if __name__ == "__main__":  # pragma: no cover
    main()
