"""Benchmark: full newform records of weight 2 (issue 3), one core.

For each level N (default 1000, 5000, 10000, 10007) a fresh single-threaded subprocess computes the
full record (traces to 1000, exact a_p to 100 for orbits of dim ≤ 20, all
signs) step by step and reports the time of each step and the peak RSS.
Usage:  python benchmarks/bench_forms.py [N ...] [--no-record]
The numbers are printed and written to the "## Newforms (issue 3)" section of
benchmarks/README.md.
"""

from __future__ import annotations

import json
import os
import platform
import resource
import subprocess
import sys
import time
from datetime import date
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from readme_section import write_section  # noqa: E402

HERE = Path(__file__).resolve().parent
SECTION = "## Newforms (issue 3)"


def _one(N: int) -> dict:
    from builder.arith import primes_up_to
    from builder.forms import unit
    from builder.forms.eigen import EigenForm, eigen_system
    from builder.forms.newspace import NewSpace
    from builder.forms.record import Params
    from builder.symbols.heilbronn import hecke_matrices
    from builder.symbols.space import cuspidal_space

    params = Params()
    steps = {}
    t = time.perf_counter()
    for p in primes_up_to(params.trace_bound):
        hecke_matrices(p)
    steps["heilbronn sets (once per process)"] = time.perf_counter() - t
    t0 = time.perf_counter()
    t = t0
    S = cuspidal_space(N, 2, 1)
    _ = S.coord_csr
    steps["symbol space (presentation, coordinates)"] = time.perf_counter() - t
    t = time.perf_counter()
    V = NewSpace(S)
    steps["old-dual Ann(Old) (exact)"] = time.perf_counter() - t
    t = time.perf_counter()
    orbits = V.orbits()
    steps["splitting (sign pieces, charpolys)"] = time.perf_counter() - t
    t = time.perf_counter()
    eigs = [EigenForm(V, o) for o in orbits]
    traces = eigen_system(V).traces(params.trace_bound) if eigs else []
    steps["eigen-functionals + traces a_n, n ≤ 1000"] = time.perf_counter() - t
    t = time.perf_counter()
    for E, tr in zip(eigs, traces, strict=True):
        unit._orbit_data(E, tr, params)
    steps["exact a_p, fields, CM, L (rest)"] = time.perf_counter() - t
    total = time.perf_counter() - t0
    ru = resource.getrusage(resource.RUSAGE_SELF)
    cpu = ru.ru_utime + ru.ru_stime
    rss = ru.ru_maxrss / 1024
    return {
        "N": N,
        "dim_new": V.dim,
        "orbits": len(orbits),
        "dims": [o.dim for o in orbits],
        "steps": steps,
        "total": total,
        "cpu_process": cpu,
        "peak_mb": rss,
    }


def main(argv: list[str]) -> None:
    if argv and argv[0] == "--child":
        print(json.dumps(_one(int(argv[1]))))
        return
    record = "--no-record" not in argv
    levels = [int(a) for a in argv if a.isdigit()] or [1000, 5000, 10000, 10007]
    results = []
    for N in levels:
        out = subprocess.run(
            [sys.executable, __file__, "--child", str(N)],
            capture_output=True, text=True, check=True,
            env={**os.environ, "PYTHONHASHSEED": "0", "OPENBLAS_NUM_THREADS": "1",
                 "OMP_NUM_THREADS": "1"},
        )
        r = json.loads(out.stdout.strip().splitlines()[-1])
        results.append(r)
        print(f"N={N}: total {r['total']:.2f} s (process CPU {r['cpu_process']:.2f} s), "
              f"peak {r['peak_mb']:.0f} MB, "
              f"dim new {r['dim_new']}, {r['orbits']} orbits")
        for name, sec in r["steps"].items():
            print(f"    {name:38s} {sec:8.2f} s")
    if record:
        _write(results)


def _write(results: list[dict]) -> None:
    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    lines = [SECTION, "",
             f"Measured {date.today().isoformat()} on {platform.node()} ({os.cpu_count()} cores, "
             f"{cpu}), Python {platform.python_version()}, one core, one run per level "
             "(fresh process each). Command: `python benchmarks/bench_forms.py`.", "",
             "| N | dim new | orbits | total s | peak MB | dominant step |",
             "|---|---|---|---|---|---|"]
    for r in results:
        steps = {k: v for k, v in r["steps"].items() if "once per process" not in k}
        dom = max(steps, key=steps.get)
        lines.append(f"| {r['N']} | {r['dim_new']} | {r['orbits']} | {r['total']:.2f} | "
                     f"{r['peak_mb']:.0f} | {dom} ({steps[dom]:.2f} s) |")
    lines += ["", "Per step (seconds):", ""]
    names = list(results[0]["steps"])
    lines.append("| step | " + " | ".join(f"N={r['N']}" for r in results) + " |")
    lines.append("|---|" + "---|" * len(results))
    for n in names:
        lines.append(f"| {n} | " + " | ".join(f"{r['steps'][n]:.2f}" for r in results) + " |")
    lines.append("")
    write_section(SECTION, lines)


if __name__ == "__main__":
    main(sys.argv[1:])
