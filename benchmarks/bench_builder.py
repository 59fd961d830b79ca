"""Overhead of the builder over the bare computation, on the quickstart job.

    python benchmarks/bench_builder.py                   # jobs/quickstart.toml
    python benchmarks/bench_builder.py --levels 1-50     # a quicker variant
    python benchmarks/bench_builder.py --workers 2       # also time a 2-process run

Each phase runs in a fresh Python process (so no cache of the math core is
shared between them):

* bare:    compute_unit(N, k, params) for every unit of the job, nothing else;
* builder: run_job(job) serially into an empty directory — planning, the
           progress display (line mode, rendered into a buffer), the log file,
           one transaction per unit into SQLite, and the Parquet export.

overhead = (builder wall − bare wall) / bare wall, minimum over ``--repeat``
alternating runs of each; target ≤ 5 %. On a shared machine that difference is
dominated by the noise of the computation itself, so the builder's own share,
measured inside one run (wall − the workers' compute time = commits, export,
plan, log, progress), is printed too; it does not depend on that noise.
"""

from __future__ import annotations

import argparse
import io
import json
import subprocess
import sys
import tempfile
import time
from dataclasses import asdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def load(args):
    sys.path.insert(0, str(ROOT))
    from builder.pipeline.jobs import load_job

    over = {"levels": args.levels, "workers": args.workers_phase}
    return load_job(ROOT / args.job, over)


def phase_bare(args) -> dict:
    from builder.forms.record import compute_unit

    job = load(args)
    t0 = time.perf_counter()
    for N, k, c in job.units():
        compute_unit(N, k, job.params, char_index=c)
    return {"wall": time.perf_counter() - t0, "units": len(job.units())}


def phase_builder(args) -> dict:
    from dataclasses import replace

    from rich.console import Console

    from builder.pipeline.run import run_job

    job = load(args)
    with tempfile.TemporaryDirectory() as d:
        job = replace(job, out=Path(d) / "out", db="")
        console = Console(file=io.StringIO(), force_terminal=False, width=120)
        t0 = time.perf_counter()
        s = run_job(job, progress="lines", console=console)
        wall = time.perf_counter() - t0
    return {
        "wall": wall,
        "units": s.computed,
        "compute": s.compute_seconds,
        "commit": s.commit_seconds,
        "export": s.export_seconds,
        "rows": s.export_rows,
        "params": asdict(job.params),
    }


def run_phase(name: str, args, workers: int = 1) -> dict:
    cmd = [
        sys.executable,
        __file__,
        "--phase",
        name,
        "--job",
        args.job,
        "--workers-phase",
        str(workers),
    ]
    if args.levels:
        cmd += ["--levels", args.levels]
    r = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(r.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--job", default="jobs/quickstart.toml")
    ap.add_argument("--levels", default=None)
    ap.add_argument("--workers", type=int, default=0, help="also time a run with N processes")
    ap.add_argument("--repeat", type=int, default=1, help="alternate bare/builder R times")
    ap.add_argument("--phase", choices=["bare", "builder"], default=None)
    ap.add_argument("--workers-phase", type=int, default=1)
    args = ap.parse_args()
    if args.phase == "bare":
        print(json.dumps(phase_bare(args)))
        return
    if args.phase == "builder":
        print(json.dumps(phase_builder(args)))
        return

    bares, builts = [], []
    for _ in range(args.repeat):
        bares.append(run_phase("bare", args))
        builts.append(run_phase("builder", args))
    bare = min(bares, key=lambda r: r["wall"])
    built = min(builts, key=lambda r: r["wall"])
    print(
        f"bare walls {[round(b['wall'], 2) for b in bares]}, builder walls "
        f"{[round(b['wall'], 2) for b in builts]} (min of each used)"
    )
    over = (built["wall"] - bare["wall"]) / bare["wall"]
    rest = built["wall"] - built["compute"] - built["commit"] - built["export"]
    print(f"job {args.job} levels={args.levels or '(file)'}: {bare['units']} units")
    print(f"  bare computation      {bare['wall']:9.2f} s")
    print(f"  builder (serial)      {built['wall']:9.2f} s   overhead {100 * over:+.2f} %")
    w = built["wall"]
    print(f"    compute in builder  {built['compute']:9.2f} s")
    print(f"    commits             {built['commit']:9.2f} s   ({100 * built['commit'] / w:.2f} %)")
    print(f"    parquet export      {built['export']:9.2f} s   ({100 * built['export'] / w:.2f} %)")
    print(f"    rest (plan, log, progress, start-up) {rest:6.2f} s   ({100 * rest / w:.2f} %)")
    print(
        f"    builder share of its own wall time: "
        f"{100 * (built['wall'] - built['compute']) / built['wall']:.2f} %"
    )
    print(f"  rows {built['rows']}")
    if args.workers:
        par = run_phase("builder", args, workers=args.workers)
        print(
            f"  builder --workers {args.workers}   {par['wall']:9.2f} s   "
            f"(speed-up {bare['wall'] / par['wall']:.2f}x over bare serial; "
            f"sum of worker compute {par['compute']:.2f} s)"
        )


if __name__ == "__main__":
    main()
