"""Benchmark of the modular-symbol engine (issue 2): weight 2, sign +1, one core.

For each level N it times the steps of building the cuspidal space and the matrix of T_2

    P¹         builder.symbols.p1.P1(N) (the ψ(N) points and the look-up tables)
    relations  ManinPresentation (2-term / star relations by union–find, 3-term by elimination)
    boundary   the boundary map and the cuspidal subspace as its kernel
    T_2        space.hecke_matrix(2) (Merel's Heilbronn sum, then restriction to the cuspidal
               subspace; the two parts are also timed separately, for information)

and the peak resident memory.  Every run is a fresh single-threaded subprocess (python-flint
and BLAS limited to one thread, so it uses one core; the lru-caches of the engine start empty
and ru_maxrss is the peak of that run alone); the table shows the median of ``--runs`` runs
(default 3).  It is not pinned to a CPU: on a shared machine a fixed CPU may be the busy one.

    /work/venv/bin/python benchmarks/bench_engine.py            # N = 1000 3000 10007 10000
    /work/venv/bin/python benchmarks/bench_engine.py 500 2000 --runs 1 --no-readme

Unless --no-readme is given, the section "## Engine (issue 2)" of benchmarks/README.md is
written (or replaced) with the numbers, the machine and the date.  Target from issue 2:
N = 10000 in ≤ 10 s and ≤ 2 GB.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import platform
import re
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
README = HERE / "README.md"
SECTION = "## Engine (issue 2)"
DEFAULT_LEVELS = [1000, 3000, 10007, 10000]
TARGET_SECONDS = 10.0
TARGET_BYTES = 2 * 1024**3
STEPS = ["p1", "relations", "boundary", "t2"]
STEP_NAMES = {"p1": "P¹", "relations": "relations", "boundary": "boundary/cuspidal", "t2": "T_2"}

_ONE_CORE_ENV = {
    "OMP_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
    "FLINT_NUM_THREADS": "1",
}


# ----------------------------------------------------------------------------------------------
# child: one measurement in a fresh process
# ----------------------------------------------------------------------------------------------


def _child(N: int) -> dict:
    sys.path.insert(0, str(ROOT))
    import flint

    try:
        flint.ctx.threads = 1
    except AttributeError:
        pass
    from builder.symbols import p1 as p1mod
    from builder.symbols.space import SymbolSpace

    rss_after_import = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss

    class TimedSpace(SymbolSpace):
        """SymbolSpace whose cuspidal step is timed (everything else in __init__ is relations)."""

        def _cuspidal(self) -> None:
            t = time.perf_counter()
            super()._cuspidal()
            self.t_boundary = time.perf_counter() - t

    out: dict = {"N": N}
    p1mod.p1.cache_clear()
    t = time.perf_counter()
    P = p1mod.p1(N)  # the cached instance, reused by the presentation below
    out["p1"] = time.perf_counter() - t
    out["psi"] = len(P)

    t = time.perf_counter()
    S = TimedSpace(N, 2, 1)
    total = time.perf_counter() - t
    out["boundary"] = S.t_boundary
    out["relations"] = total - S.t_boundary
    out["dim"] = S.dim
    out["dim_cuspidal"] = S.dim_cuspidal

    t = time.perf_counter()
    T2 = S.hecke_matrix(2)
    out["t2"] = time.perf_counter() - t
    out["t2_rows"] = T2.nrows()
    out["rss_main"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024

    # informational split of T_2 (the same work again): the Heilbronn sum on the free basis
    # (sparse rows if the engine has them, else the dense full matrix), then the restriction
    heilbronn = getattr(S, "hecke_rows", None) or S.hecke_full
    clear = getattr(getattr(type(S), heilbronn.__name__, None), "cache_clear", None)
    if clear is not None:
        clear()
    t = time.perf_counter()
    full = heilbronn(2)
    out["t2_heilbronn"] = time.perf_counter() - t
    t = time.perf_counter()
    S.restrict(full)
    out["t2_restrict"] = time.perf_counter() - t
    out["t2_split_via"] = heilbronn.__name__

    out["rss_import"] = rss_after_import * 1024
    return out


# ----------------------------------------------------------------------------------------------
# parent: runs, medians, table, README
# ----------------------------------------------------------------------------------------------


def _run_child(N: int) -> dict:
    env = dict(os.environ, **_ONE_CORE_ENV)
    proc = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--child", str(N)],
        capture_output=True,
        text=True,
        env=env,
        check=False,
    )
    if proc.returncode != 0:
        raise RuntimeError(f"benchmark child for N={N} failed:\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _median(runs: list[dict], key: str) -> float:
    return statistics.median(r[key] for r in runs)


def measure(levels: list[int], nruns: int, progress=print) -> list[dict]:
    rows = []
    for N in levels:
        runs = []
        for i in range(nruns):
            r = _run_child(N)
            runs.append(r)
            step_sum = sum(r[s] for s in STEPS)
            mib = r["rss_main"] / 2**20
            progress(f"  N={N} run {i + 1}/{nruns}: {step_sum:.2f} s, {mib:.0f} MiB")
        row = {k: _median(runs, k) for k in STEPS + ["t2_heilbronn", "t2_restrict"]}
        row["total"] = statistics.median(sum(r[s] for s in STEPS) for r in runs)
        row["rss"] = statistics.median(r["rss_main"] for r in runs)
        row["rss_import"] = statistics.median(r["rss_import"] for r in runs)
        for k in ("N", "psi", "dim", "dim_cuspidal", "t2_split_via"):
            row[k] = runs[0][k]
        row["dominant"] = max(STEPS, key=lambda s: row[s])
        rows.append(row)
    return rows


def machine() -> dict:
    model = platform.processor() or "unknown"
    try:
        text = Path("/proc/cpuinfo").read_text()
        m = re.search(r"^model name\s*:\s*(.+)$", text, re.M)
        if m:
            model = m.group(1).strip()
    except OSError:
        pass
    mem = "unknown"
    try:
        m = re.search(r"^MemTotal:\s*(\d+) kB", Path("/proc/meminfo").read_text(), re.M)
        if m:
            mem = f"{int(m.group(1)) / 2**20:.1f} GiB"
    except OSError:
        pass
    import flint
    import numpy

    try:
        load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:
        load = "n/a"
    return {
        "nproc": os.cpu_count(),
        "cpu": model,
        "memory": mem,
        "python": platform.python_version(),
        "python-flint": getattr(flint, "__version__", "?"),
        "numpy": numpy.__version__,
        "date": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "load": load,
    }


def table(rows: list[dict]) -> str:
    head = ("| N | ψ(N) | dim (+1) | dim cusp | P¹ s | relations s | boundary s | T_2 s "
            "| total s | peak RSS MiB | dominant |")  # fmt: skip
    sep = "|" + "---|" * 11
    lines = [head, sep]
    for r in rows:
        lines.append(
            f"| {r['N']} | {r['psi']} | {r['dim']} | {r['dim_cuspidal']} | {r['p1']:.3f} "
            f"| {r['relations']:.3f} | {r['boundary']:.3f} | {r['t2']:.3f} | {r['total']:.2f} "
            f"| {r['rss'] / 2**20:.0f} | {STEP_NAMES[r['dominant']]} |"
        )
    return "\n".join(lines)


def split_table(rows: list[dict]) -> str:
    lines = [
        "| N | T_2: Heilbronn sum s | T_2: restriction to cuspidal s | Heilbronn step timed |",
        "|---|---|---|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['N']} | {r['t2_heilbronn']:.3f} | {r['t2_restrict']:.3f} "
            f"| `{r['t2_split_via']}` |"
        )
    return "\n".join(lines)


def section(rows: list[dict], info: dict, nruns: int) -> str:
    verdict = []
    for r in rows:
        if r["N"] == 10000:
            ok_t = r["total"] <= TARGET_SECONDS
            ok_m = r["rss"] <= TARGET_BYTES
            verdict.append(
                f"Target (issue 2) N = 10000 in ≤ {TARGET_SECONDS:.0f} s and ≤ 2 GB: "
                f"{r['total']:.2f} s ({'met' if ok_t else 'NOT met'}), "
                f"{r['rss'] / 2**20:.0f} MiB peak RSS ({'met' if ok_m else 'NOT met'})."
            )
    dom = {}
    for r in rows:
        dom.setdefault(STEP_NAMES[r["dominant"]], []).append(str(r["N"]))
    dom_text = "; ".join(f"{k} at N = {', '.join(v)}" for k, v in dom.items())
    shares = []
    for r in rows:
        parts = ", ".join(f"{STEP_NAMES[s]} {100 * r[s] / r['total']:.0f}%" for s in STEPS)
        shares.append(f"N = {r['N']}: {parts}")
    base = rows[0]["rss_import"] / 2**20 if rows else 0
    return "\n".join(
        [
            SECTION,
            "",
            "Weight 2, sign +1: cuspidal space and the matrix of T_2, one core "
            f"(each run a fresh single-threaded process), median of {nruns} runs.",
            "Produced by `python benchmarks/bench_engine.py`; rerun it to update this section.",
            "",
            table(rows),
            "",
            *verdict,
            "",
            f"Dominant step: {dom_text}.",
            "",
            "Share of the total per step: " + "; ".join(shares) + ".",
            "",
            "T_2 split (the same work timed again in two parts):",
            "",
            split_table(rows),
            "",
            f"Peak RSS is ru_maxrss of the whole process; about {base:.0f} MiB of it is the "
            "interpreter with numpy and python-flint imported.",
            "",
            f"Machine: {info['nproc']} CPUs (nproc), {info['cpu']}, {info['memory']} RAM; "
            f"Python {info['python']}, python-flint {info['python-flint']}, "
            f"numpy {info['numpy']}. Date: {info['date']}. Load average at start: {info['load']}.",
            "",
        ]
    )


def update_readme(text: str, path: Path = README) -> None:
    old = path.read_text() if path.exists() else "# Benchmarks\n"
    pattern = re.compile(rf"^{re.escape(SECTION)}\n.*?(?=^## |\Z)", re.M | re.S)
    if pattern.search(old):
        new = pattern.sub(lambda _m: text + "\n", old, count=1)
    else:
        new = old.rstrip("\n") + "\n\n" + text
    path.write_text(new.rstrip("\n") + "\n")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("levels", nargs="*", type=int, default=DEFAULT_LEVELS)
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--no-readme", action="store_true", help="do not touch benchmarks/README.md")
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child is not None:
        print(json.dumps(_child(args.child)))
        return 0
    if args.runs < 1 or any(N < 1 for N in args.levels):
        ap.error("levels and --runs must be positive")
    info = machine()
    print(f"engine benchmark: weight 2, sign +1, levels {args.levels}, {args.runs} runs each")
    rows = measure(args.levels, args.runs)
    print()
    print(table(rows))
    print()
    print(split_table(rows))
    if not args.no_readme:
        update_readme(section(rows, info, args.runs))
        print(f"\nwrote the section {SECTION!r} of {README}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
