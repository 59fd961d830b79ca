"""Plan, run, resume and extend a job — the library API behind `nfb run`.

    from builder.pipeline.jobs import load_job
    from builder.pipeline.run import plan_job, run_job

    job = load_job("jobs/quickstart.toml")
    print(plan_job(job).total_estimate)        # seconds, from measured rates
    summary = run_job(job, progress="none")    # what `nfb run` does

A *unit* is (N, k, j): level, weight and the index j of a Galois orbit of
Dirichlet characters mod N (0 = trivial; the job's ``characters`` selection, see
builder/pipeline/jobs.py, decides which j, never one that is zero by parity). The
plan is every unit of the job that the database does not hold as 'done' with the
job's bounds, in the canonical order (weight, level, j). That one rule gives
resume (done units are skipped; a unit interrupted before its commit is absent
and planned again), retry (a 'failed' unit is planned again) and extend (more
levels/weights: only the new units; larger bounds with ``extend=True``: the
units stored with smaller bounds are recomputed and replaced, each in one
transaction, so an interrupted extension resumes like any run). The character
selection is not a bound: a rerun with another selection plans other units of
the same database (the units outside the selection stay stored, untouched).

A database records the bounds it is built with (meta.params). A job with other
bounds is refused (``BadInput``, exit code 2, nothing written) unless
``extend=True``; extending never lowers a bound.

Time estimates (``--dry-run``, the ETA) use the model t(N, k) = A_k·x^B_k with
x = (k − 1)·ψ(N) (≈ the number of Manin symbols), one (A_k, B_k) per weight,
fitted by least squares on log t over the units already stored
(``spaces.seconds``; units stored with another trace_bound are rescaled by
(trace_bound ratio)^e_k, ``TRACE_EXP``). With no measured units, ``DEFAULT_MODEL``
(measured on the quickstart job on this project's 2-core reference machine,
benchmarks/README.md) is used. Units with a nontrivial character j are a second
family with its own fits and x = (k − 1)·ψ(N)·[Q(χ):Q] (their cost grows with the
degree of the character's values); ``DEFAULT_CHAR_MODEL`` was measured on
jobs/characters.toml (levels ≤ 40 only, so a rough guide for larger levels).
"""

from __future__ import annotations

import logging
import math
import os
import subprocess
import time
import traceback
from dataclasses import asdict, dataclass, field
from pathlib import Path

from rich.console import Console

from builder.forms.record import Params
from builder.pipeline.errors import BadInput, Interrupted, NfbError, StorageError, UnitsFailed
from builder.pipeline.executors import Executor, Unit, make_executor
from builder.pipeline.jobs import Job, character_table, compress_levels, redact_url
from builder.pipeline.progress import fmt_seconds, make_reporter
from builder.pipeline.signals import SignalGuard

log = logging.getLogger("nfb")

LOG_NAME = "nfb.log"
MIN_FIT = 8
# t ≈ A_k · ((k−1)·ψ(N))^B_k seconds at trace_bound 100, one core of the reference
# machine (benchmarks/README.md): weight 2 from benchmarks/bench_overnight.py (127 full
# units, levels 1..10000, 2026-12-03: 0.0108·ψ^0.52 at trace_bound 1000, rescaled by
# 10^−0.5; it overestimates the smallest levels, which cost little anyway); weight 4 from
# the quickstart run (N ≤ 100 only). Higher weights use weight 4's.
DEFAULT_MODEL = {2: (3.4e-3, 0.52), 4: (4.6e-4, 1.26)}
# nontrivial characters, x = (k−1)·ψ(N)·[Q(χ):Q], all weights: least squares over the
# 253 nontrivial units of levels 10-40 of jobs/characters.toml (trace_bound 100; the
# residuals are large, ~1.5 in log t: a rough guide until the database has measurements)
DEFAULT_CHAR_MODEL = (6.8e-6, 1.73)
# t ∝ trace_bound^e_k, measured between trace_bound 100 and 1000 (levels ≤ 1000)
TRACE_EXP = {2: 0.5, 4: 1.5}


def trace_exp(k: int) -> float:
    return TRACE_EXP.get(k, TRACE_EXP[4])


# ----------------------------------------------------------------------------- small math


def psi(N: int) -> int:
    """ψ(N) = N ∏_{p|N} (1 + 1/p) = [SL2(Z) : Γ0(N)]."""
    out, n, p = N, N, 2
    while p * p <= n:
        if n % p == 0:
            out = out // p * (p + 1)
            while n % p == 0:
                n //= p
        p += 1
    if n > 1:
        out = out // n * (n + 1)
    return out


def sturm_bound(N: int, k: int) -> int:
    """⌊k·ψ(N)/12⌋ [Su]."""
    return k * psi(N) // 12


def unit_label(unit: Unit) -> str:
    N, k, c = unit
    return f"{N}w{k}" + (f"c{c}" if c else "")


def char_degree(N: int, j: int) -> int:
    """[Q(χ):Q] = φ(order) for the character orbit j mod N (1 if j is not an index)."""
    table = character_table(N)
    m = table[j][1] if 0 <= j < len(table) else 1
    return sum(1 for a in range(1, m + 1) if math.gcd(a, m) == 1)


def cost_feature(unit: Unit) -> float:
    N, k, j = unit
    return float((k - 1) * psi(N) * (char_degree(N, j) if j else 1))


def code_version() -> str:
    try:
        from importlib.metadata import version

        v = version("nfb")
    except Exception:
        v = "unknown"
    try:
        root = Path(__file__).resolve().parents[2]
        sha = subprocess.run(
            ["git", "-C", str(root), "rev-parse", "--short=12", "HEAD"],
            capture_output=True,
            text=True,
            timeout=5,
        ).stdout.strip()
        if sha:
            dirty = subprocess.run(
                ["git", "-C", str(root), "status", "--porcelain", "--untracked-files=no"],
                capture_output=True,
                text=True,
                timeout=5,
            ).stdout.strip()
            v += f"+g{sha}" + (".dirty" if dirty else "")
    except Exception:
        pass
    return v


# ----------------------------------------------------------------------------- estimates


@dataclass
class Model:
    """t(N, k) ≈ A_k · x^B_k seconds, x = (k − 1)·ψ(N); ``fits[k] = (A_k, B_k)``.

    ``char_*``: the same for the units with a nontrivial character (``cost_feature``).
    """

    fits: dict[int, tuple[float, float]]
    fallback: tuple[float, float]
    source: str
    trace_bound: int | None = None  # default model: rescale from trace_bound 100
    char_fits: dict[int, tuple[float, float]] = field(default_factory=dict)
    char_fallback: tuple[float, float] = DEFAULT_CHAR_MODEL
    char_trace_bound: int | None = None

    def predict(self, unit: Unit) -> float:
        if unit[2]:
            A, B = self.char_fits.get(unit[1], self.char_fallback)
            tb = self.char_trace_bound
        else:
            A, B = self.fits.get(unit[1], self.fallback)
            tb = self.trace_bound
        scale = 1.0
        if tb is not None:
            scale = (tb / 100) ** trace_exp(unit[1])
        return scale * A * cost_feature(unit) ** B


def _least_squares(pts: list[tuple[float, float]]) -> tuple[float, float] | None:
    if len(pts) < MIN_FIT:
        return None
    xs = [x for x, _ in pts]
    if max(xs) - min(xs) < 0.5:
        return None
    n = len(pts)
    mx, my = sum(xs) / n, sum(y for _, y in pts) / n
    sxx = sum((x - mx) ** 2 for x in xs)
    B = sum((x - mx) * (y - my) for x, y in pts) / sxx
    B = min(max(B, 0.3), 4.0)
    return math.exp(my - B * mx), B


def _fit_family(states: dict, params: Params, nontrivial: bool):
    """(fits per weight, joint fit or None, number of measured units) of one family."""
    from builder.storage.models import STATUS_DONE

    pts: dict[int, list[tuple[float, float]]] = {}
    n = 0
    for u, st in states.items():
        if bool(u[2]) != nontrivial:
            continue
        if st.status != STATUS_DONE or st.seconds <= 0 or cost_feature(u) <= 0:
            continue
        tb = st.params.get("trace_bound", params.trace_bound) or params.trace_bound
        y = math.log(st.seconds) + trace_exp(u[1]) * math.log(params.trace_bound / tb)
        pts.setdefault(u[1], []).append((math.log(cost_feature(u)), y))
        n += 1
    joint = _least_squares([p for v in pts.values() for p in v])
    if joint is None:
        return {}, None, n
    return {k: f for k, v in pts.items() if (f := _least_squares(v)) is not None}, joint, n


def fit_model(states: dict, params: Params) -> Model:
    """Least squares of log t on log x over the stored units (see the module doc).

    Units stored with another trace_bound count with their time scaled by
    (trace_bound / theirs)^e_k (``TRACE_EXP``); a weight with fewer than MIN_FIT measured
    units uses the fit over all weights, and no measurements the default model. The
    trivial and the nontrivial characters are fitted separately.
    """
    fits, joint, n = _fit_family(states, params, nontrivial=False)
    char_fits, char_joint, m = _fit_family(states, params, nontrivial=True)
    if joint is not None:
        model = Model(fits, joint, f"fitted on {n} measured units")
    else:
        A, B = DEFAULT_MODEL[4]
        model = Model(
            dict(DEFAULT_MODEL),
            (A, B),
            "default model (benchmarks/README.md); no measured units yet",
            trace_bound=params.trace_bound,
        )
    if char_joint is not None:
        model.char_fits, model.char_fallback = char_fits, char_joint
        model.source += f"; nontrivial characters fitted on {m} measured units"
    else:
        model.char_trace_bound = params.trace_bound
    return model


# ----------------------------------------------------------------------------- planning


@dataclass
class Plan:
    job: Job
    todo: list[Unit]
    skipped: int  # units of the job already done with the job's bounds
    redo: int  # units of the job present with other bounds or failed (in todo)
    estimates: dict[Unit, float]
    model: Model
    db_exists: bool
    db_params: Params | None
    extend: bool
    warnings: list[str] = field(default_factory=list)
    total: int = 0  # units of the job (done or not)

    @property
    def total_estimate(self) -> float:
        return sum(self.estimates.values())

    def render(self, console: Console) -> None:
        job = self.job
        chars = job.characters
        console.print(f"[bold]plan[/bold] for {job.name or job.source}")
        console.print(
            f"  levels {compress_levels(job.levels)}, weights {list(job.weights)}, "
            + ("" if chars.is_trivial else f"characters {chars.spec}, ")
            + f"bounds {asdict(job.params)}",
            markup=False,
        )
        console.print(f"  database {redact_url(job.db_url)}" + ("" if self.db_exists else " (new)"))
        console.print(
            f"  units: {self.total} in the job, {self.skipped} done, "
            f"{len(self.todo)} to compute" + (f" ({self.redo} recomputed)" if self.redo else "")
        )
        for k in job.weights:
            units = [u for u in self.todo if u[1] == k]
            if units:
                est = sum(self.estimates[u] for u in units)
                nontrivial = sum(1 for u in units if u[2])
                split = (
                    ""
                    if chars.is_trivial
                    else f" ({len(units) - nontrivial} trivial χ, {nontrivial} nontrivial χ)"
                )
                console.print(
                    f"    weight {k}: {len(units)} units{split}, levels "
                    f"{compress_levels(sorted({u[0] for u in units}))}, "
                    f"≈ {fmt_seconds(est)} of compute"
                )
        par = job.workers if not job.dask else None
        wall = self.total_estimate / (par or 1)
        how = (
            f"with {par} worker{'s' if par and par > 1 else ''}"
            if par
            else "on Dask (divide by its number of workers)"
        )
        console.print(
            f"  estimate: {fmt_seconds(self.total_estimate)} of compute, "
            f"≈ {fmt_seconds(wall)} {how}; {self.model.source}"
        )
        for w in self.warnings:
            console.print(f"  [yellow]warning:[/yellow] {w}")


def _compare_params(job: Job, stored: Params, where: str, extend: bool) -> None:
    new, old = asdict(job.params), asdict(stored)
    if new == old:
        return
    if not extend:
        diffs = [k for k in new if new[k] != old[k]]
        key = diffs[0]
        detail = ", ".join(f"{k}={old[k]} (job: {new[k]})" for k in diffs)
        raise BadInput(
            where,
            key,
            f"this database was built with other bounds: {detail}; rerun with --extend to "
            "recompute its units with the job's bounds, or choose another --out/--db",
        )
    for k in new:
        if new[k] < old[k]:
            w, key = job.origin(k)
            raise BadInput(
                w,
                key,
                f"{k}={new[k]} is smaller than the database's {old[k]}: extending only grows "
                "bounds (choose another --out/--db for a table with smaller bounds)",
            )


def make_plan(job: Job, extend: bool = False) -> tuple[Plan, object | None]:
    """Read (never write) the target database and plan the job. Returns (plan, engine)."""
    from builder.storage.db import (
        check_schema,
        database_exists,
        make_engine,
        redact,
        stored_params,
    )
    from builder.storage.models import STATUS_DONE
    from builder.storage.reader import unit_states

    url = job.db_url
    where = redact(url)
    exists = database_exists(url)
    states: dict = {}
    db_params = None
    engine = None
    if exists:
        engine = make_engine(url)
        try:
            meta = check_schema(engine, where)
        except BadInput:
            engine.dispose()
            raise
        except Exception as e:
            engine.dispose()
            raise BadInput(where, None, f"cannot read this database: {e}") from None
        db_params = stored_params(meta)
        if db_params is not None:
            _compare_params(job, db_params, where, extend)
        states = unit_states(engine)
    want = asdict(job.params)
    units = job.units()
    todo: list[Unit] = []
    skipped = redo = 0
    for unit in units:
        st = states.get(unit)
        if st is not None and st.status == STATUS_DONE and st.params == want:
            skipped += 1
            continue
        if st is not None:
            redo += 1
        todo.append(unit)
    model = fit_model(states, job.params)
    estimates = {u: model.predict(u) for u in todo}
    warnings = []
    low = [u for u in units if sturm_bound(u[0], u[1]) > job.params.trace_bound]
    if low:
        u = low[0]
        warnings.append(
            f"trace_bound {job.params.trace_bound} is below the Sturm bound of {len(low)} "
            f"units (from {unit_label(u)}: {sturm_bound(u[0], u[1])}); their stored traces "
            "need not separate every pair of orbits (labels and exact a_p are unaffected)"
        )
    empty = [k for k in job.weights if not any(u[1] == k for u in units)]
    if empty:
        warnings.append(
            f"no units of weight{'s' if len(empty) > 1 else ''} {', '.join(map(str, empty))}: "
            f'characters "{job.characters.spec}" has no orbit with χ(−1) = (−1)^k at levels '
            f"{compress_levels(job.levels)}"
        )
    plan = Plan(
        job, todo, skipped, redo, estimates, model, exists, db_params, extend, warnings, len(units)
    )
    return plan, engine


def plan_job(job: Job, extend: bool = False) -> Plan:
    plan, engine = make_plan(job, extend)
    if engine is not None:
        engine.dispose()
    return plan


# ----------------------------------------------------------------------------- pre-flight


def _check_dir_writable(path: Path, where: str, key: str, what: str) -> None:
    """Without writing anything: can ``path`` (a directory) be created and written?"""
    if path.exists():
        if not path.is_dir():
            raise BadInput(where, key, f"{what} {path} exists and is not a directory")
        if not os.access(path, os.W_OK | os.X_OK):
            raise BadInput(where, key, f"{what} {path} is not writable (permission denied)")
        return
    parent = path.parent if path.parent != path else path
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir():
        raise BadInput(where, key, f"cannot create {what} {path}: {parent} is not a directory")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise BadInput(
            where, key, f"cannot create {what} {path}: {parent} is not writable (permission denied)"
        )


def _make_dir(path: Path, where: str, key: str, what: str) -> None:
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise BadInput(where, key, f"cannot create {what} {path}: {e.strerror or e}") from None


def preflight(job: Job) -> None:
    from builder.storage.db import sqlite_path

    where, key = job.origin("out")
    _check_dir_writable(job.out, where, key, "output directory")
    db_file = sqlite_path(job.db_url)
    if db_file is not None and job.db:
        w, k = job.origin("db")
        _check_dir_writable(db_file.parent, w, k, "database directory")


# ----------------------------------------------------------------------------- running


@dataclass
class RunSummary:
    status: str  # done | dry-run | nothing-to-do | failed
    planned: int = 0
    computed: int = 0
    failed: list[Unit] = field(default_factory=list)
    skipped: int = 0
    wall_seconds: float = 0.0
    compute_seconds: float = 0.0  # sum of the workers' compute_unit times
    commit_seconds: float = 0.0
    export_seconds: float = 0.0
    run_id: int | None = None
    export_rows: dict = field(default_factory=dict)
    plan: Plan | None = None


class _LogToFile:
    def __init__(self, path: Path) -> None:
        self.path = path
        self.handler: logging.Handler | None = None

    def __enter__(self):
        self.handler = logging.FileHandler(self.path, encoding="utf-8")
        self.handler.setFormatter(
            logging.Formatter("%(asctime)s %(levelname)s %(message)s", "%Y-%m-%dT%H:%M:%S")
        )
        log.addHandler(self.handler)
        log.setLevel(logging.INFO)
        return self

    def __exit__(self, *exc):
        if self.handler is not None:
            log.removeHandler(self.handler)
            self.handler.close()


def run_job(
    job: Job,
    *,
    extend: bool = False,
    dry_run: bool = False,
    progress: str = "auto",
    console: Console | None = None,
    export_parquet: bool = True,
    executor: Executor | None = None,
) -> RunSummary:
    """Run (or resume / extend) ``job``. See the module docstring.

    ``progress``: 'auto' | 'bar' | 'lines' | 'none'. Raises ``BadInput`` (nothing
    written), ``StorageError``, ``Interrupted`` (after a clean stop) or
    ``UnitsFailed`` (after storing every unit that did not fail).
    """
    console = console or Console(stderr=True, quiet=(progress == "none"), soft_wrap=True)
    plan, engine = make_plan(job, extend)
    if dry_run:
        plan.render(console)
        if engine is not None:
            engine.dispose()
        return RunSummary("dry-run", planned=len(plan.todo), skipped=plan.skipped, plan=plan)

    t_start = time.perf_counter()
    try:
        preflight(job)
        if executor is None:
            try:
                executor = make_executor(job.workers, job.dask)
            except OSError as e:
                w, k = job.origin("dask")
                raise BadInput(w, k, f"cannot reach the Dask scheduler {job.dask}: {e}") from None
        where, key = job.origin("out")
        _make_dir(job.out, where, key, "output directory")
        try:
            logctx = _LogToFile(job.out / LOG_NAME).__enter__()
        except OSError as e:
            raise BadInput(
                where, key, f"cannot write to the output directory {job.out}: {e.strerror or e}"
            ) from None
    except BaseException:
        if engine is not None:
            engine.dispose()
        if executor is not None:
            executor.close(cancel=True)
        raise
    try:
        return _run(job, plan, engine, executor, progress, console, export_parquet, t_start)
    finally:
        logctx.__exit__(None, None, None)


def _run(job, plan, engine, executor, progress, console, export_parquet, t_start) -> RunSummary:
    from builder.storage.db import init_schema, make_engine, set_params
    from builder.storage.parquet import export
    from builder.storage.writer import Writer

    summary = RunSummary("done", planned=len(plan.todo), skipped=plan.skipped, plan=plan)
    if engine is None:
        from builder.storage.db import sqlite_path

        db_file = sqlite_path(job.db_url)
        if db_file is not None:
            w, k = job.origin("db" if job.db else "out")
            _make_dir(db_file.parent, w, k, "database directory")
        engine = make_engine(job.db_url)
    params = asdict(job.params)
    guard = SignalGuard().install()
    writer: Writer | None = None
    reporter = None
    status, message = "error", None
    try:
        init_schema(engine, job.params)
        if plan.db_params is not None and plan.db_params != job.params:
            set_params(engine, job.params)  # extend: the database now has the new bounds
        version = code_version()
        run_id = Writer.start_run(engine, version, params, job.describe(), len(plan.todo))
        summary.run_id = run_id
        writer = Writer(engine, run_id, critical=guard.defer)
        log.info(
            "run %d start: %s; %d units to compute, %d already done; %s; code %s",
            run_id,
            job.describe(),
            len(plan.todo),
            plan.skipped,
            executor.describe(),
            version,
        )
        for w in plan.warnings:
            log.warning(w)
        console.print(
            f"nfb: {len(plan.todo)} units to compute ({plan.skipped} already done) on "
            f"{executor.describe()}; log: {job.out / LOG_NAME}"
        )
        reporter = make_reporter(progress, len(plan.todo), plan.total_estimate, console)
        reporter.start()
        executor.on_change = lambda units: reporter.set_current(
            ", ".join(unit_label(u) for u in units)
        )
        for out in executor.run(plan.todo, params):
            unit = out.unit
            summary.compute_seconds += out.seconds
            rec = out.record
            error = out.error
            if rec is not None:
                got = (rec.level, rec.weight, rec.char_index)
                if got != unit or rec.params != params:
                    error = f"the record returned for {unit} is for {got} with {rec.params}"
            if error is None:
                digest = writer.commit(rec)
                summary.computed += 1
                log.info(
                    "stored %s: %d orbits, %.3fs, hash %s",
                    unit_label(unit),
                    rec.num_orbits,
                    out.seconds,
                    digest[:16],
                )
            else:
                writer.commit_failure(unit, params, error, out.seconds)
                summary.failed.append(unit)
                log.error("unit %s FAILED:\n%s", unit_label(unit), error)
                console.print(f"[red]unit {unit_label(unit)} failed[/red] (traceback in the log)")
            reporter.advance(
                plan.estimates.get(unit, 0.0), ", ".join(unit_label(u) for u in executor.in_flight)
            )
        reporter.stop()
        reporter = None
        executor.close()
        summary.commit_seconds = writer.commit_seconds
        if export_parquet:
            t0 = time.perf_counter()
            res = export(engine, job.out / "parquet")
            summary.export_seconds = time.perf_counter() - t0
            summary.export_rows = res.rows
            log.info("exported %s to %s", res.rows, res.root)
        summary.wall_seconds = time.perf_counter() - t_start
        if summary.failed:
            status = "failed"
            message = "failed units: " + ", ".join(unit_label(u) for u in summary.failed)
            summary.status = "failed"
        else:
            status = "done"
            summary.status = "done" if plan.todo else "nothing-to-do"
        log.info(
            "run %d %s: %d computed, %d failed, wall %.2fs, compute %.2fs, commit %.2fs, "
            "export %.2fs",
            run_id,
            status,
            summary.computed,
            len(summary.failed),
            summary.wall_seconds,
            summary.compute_seconds,
            summary.commit_seconds,
            summary.export_seconds,
        )
        console.print(
            f"nfb: {status}: {summary.computed} units computed, {len(summary.failed)} failed, "
            f"{summary.skipped} were already done; {fmt_seconds(summary.wall_seconds)}; "
            f"tables in {job.out}"
        )
        if summary.failed:
            raise UnitsFailed(
                f"{len(summary.failed)} units failed ({message}); the others are stored — "
                f"see {job.out / LOG_NAME}; rerun to retry them"
            )
        return summary
    except Interrupted as e:
        status, message = "interrupted", f"signal {e.signum}"
        log.warning("run interrupted by signal %d; %d units stored", e.signum, summary.computed)
        raise
    except NfbError as e:
        status = "failed" if isinstance(e, UnitsFailed) else "error"
        message = str(e)
        if not isinstance(e, UnitsFailed):
            log.error("%s", e)
        raise
    except BaseException as e:
        message = "".join(traceback.format_exception(e))[-4000:]
        log.error("unexpected error (a bug):\n%s", message)
        raise
    finally:
        if reporter is not None:
            try:
                reporter.stop()
            except Exception:
                pass
        if status != "done":
            executor.close(cancel=True)
        if writer is not None:
            writer.finish_run(status, summary.computed, message)
        guard.uninstall()
        engine.dispose()
        if status == "interrupted":
            console.print(
                f"nfb: interrupted; {summary.computed} units stored this run. "
                "Rerun the same command to resume."
            )


__all__ = [
    "Plan",
    "RunSummary",
    "StorageError",
    "make_plan",
    "plan_job",
    "run_job",
    "psi",
    "sturm_bound",
]
