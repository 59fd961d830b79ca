"""Benchmark (issue 6): weight 2, trivial character, every level N ≤ 10 000 overnight?

    python benchmarks/bench_overnight.py                 # everything, ~15 minutes
    python benchmarks/bench_overnight.py --quick         # smaller sample, no N ≤ 1000 run
    python benchmarks/bench_overnight.py --no-record     # print only

Full units (trace_bound 1000, exact a_p to 100 for orbits of dimension ≤ 20, all signs,
CM, L-values) with the default parameters of a job.  Parts:

(a) sample levels 500 … 10000: each unit in a fresh single-threaded process, its time
    and peak RSS (ru_maxrss of that process), then its time again in that process once
    the level caches are cleared (a worker's steady state);
(b) the growth exponent: least squares of log t on log ψ(N) over (a) and (c);
(c) the projection of the whole job N ≤ 10000 with 2 workers: a random sample of levels
    (uniform on 1..10000, fixed seed), computed two at a time — as the two workers of a
    real run share the machine — so that mean × 10000 / 2 is the wall time of the job;
(d) the real job N ≤ 1000, weight 2, `nfb run --workers 2` end to end (SQLite, Parquet),
    then `nfb verify` on it;
(e) per sample level, unit time / (python-flint's charpoly + factor of T_q on the new
    part, q the first prime ∤ N) — the core no method can avoid.  T_2 itself is U_2 when
    2 | N (zero on the new part when 4 | N), so q = 2 is replaced by the first good prime.
Numbers are printed and written to the "## Overnight (issue 6)" section of
benchmarks/README.md, with the machine and the date.
"""

from __future__ import annotations

import json
import math
import os
import platform
import random
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import date
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from readme_section import write_section  # noqa: E402

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SECTION = "## Overnight (issue 6)"
LEVELS = [500, 1000, 2000, 4000, 6000, 8000, 10000]
REPEAT = 3  # warm units and core timings per level: their median is reported
ENV = {**os.environ, "PYTHONHASHSEED": "0", "OPENBLAS_NUM_THREADS": "1",
       "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def _unit(N: int) -> dict:
    """One full unit in this (fresh) process: time, peak RSS and the core reference."""
    sys.path.insert(0, str(ROOT))
    import flint

    from builder.forms.newspace import NewSpace
    from builder.forms.record import Params, compute_unit
    from builder.symbols.space import clear_caches, cuspidal_space

    t0 = time.perf_counter()
    R = compute_unit(N, 2, Params())
    unit = time.perf_counter() - t0
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    warms = []
    for _ in range(REPEAT):  # again, as a worker's later units: level caches cleared,
        clear_caches()  # the level-free ones (Heilbronn sets, imports) kept
        t0 = time.perf_counter()
        compute_unit(N, 2, Params())
        warms.append(time.perf_counter() - t0)
    clear_caches()
    V = NewSpace(cuspidal_space(N, 2, 1))
    q = V.good_primes()[0]
    A = V.op("T", q).to_fmpq_mat()  # T_q on the new part (plus its new Eisenstein line(s))
    cores = []
    for _ in range(REPEAT):
        t0 = time.perf_counter()
        cp = A.charpoly()
        flint.fmpz_poly([int(c.p) for c in cp.coeffs()]).factor()
        cores.append(time.perf_counter() - t0)
    warm, core = statistics.median(warms), statistics.median(cores)
    return {"N": N, "t": unit, "warm": warm, "rss": rss, "core": core, "q": q, "dim_new": R.dim_new,
            "orbits": R.num_orbits, "maxd": max([f.dim for f in R.newforms] or [0])}


def _sample(levels: list[int]) -> list[dict]:
    """Units one after another in one process (a worker's life), for the projection."""
    sys.path.insert(0, str(ROOT))
    from builder.forms.record import Params, compute_unit

    out = []
    for N in levels:
        t0 = time.perf_counter()
        compute_unit(N, 2, Params())
        out.append({"N": N, "t": time.perf_counter() - t0})
    return out


def _child(*args: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, __file__, *args], stdout=subprocess.PIPE,
                            text=True, env=ENV)


def _last_json(proc: subprocess.Popen):
    out, _ = proc.communicate()
    if proc.returncode:
        raise SystemExit(f"child failed with {proc.returncode}")
    return json.loads(out.strip().splitlines()[-1])


def psi(N: int) -> int:
    out, m, p = N, N, 2
    while p * p <= m:
        if m % p == 0:
            out = out // p * (p + 1)
            while m % p == 0:
                m //= p
        p += 1
    if m > 1:
        out = out // m * (m + 1)
    return out


def fit(points: list[tuple[float, float]]) -> tuple[float, float]:
    xs = [math.log(x) for x, _ in points]
    ys = [math.log(y) for _, y in points]
    mx, my = statistics.mean(xs), statistics.mean(ys)
    B = sum((x - mx) * (y - my) for x, y in zip(xs, ys, strict=True)) / sum(
        (x - mx) ** 2 for x in xs)
    return math.exp(my - B * mx), B


def run_real_job(top: int) -> dict:
    """`nfb run --levels 1-top --weights 2 --workers 2` into a fresh directory, then verify."""
    nfb = str(Path(sys.executable).with_name("nfb"))
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "out"
        t0 = time.perf_counter()
        r = subprocess.run([nfb, "run", "--levels", f"1-{top}", "--weights", "2",
                            "--workers", "2", "--out", str(out), "--progress", "none"],
                           env=ENV, capture_output=True, text=True)
        wall = time.perf_counter() - t0
        t0 = time.perf_counter()
        v = subprocess.run([nfb, "verify", str(out)], env=ENV, capture_output=True,
                           text=True)
        vwall = time.perf_counter() - t0
        tail = (v.stdout or v.stderr).strip().splitlines()[-12:]
    return {"levels": top, "wall": wall, "run_exit": r.returncode, "verify_exit": v.returncode,
            "verify_wall": vwall, "verify_tail": tail}


def main(argv: list[str]) -> None:
    if argv and argv[0] == "--unit":
        print(json.dumps(_unit(int(argv[1]))))
        return
    if argv and argv[0] == "--sample":
        print(json.dumps(_sample([int(x) for x in argv[1].split(",")])))
        return
    quick = "--quick" in argv
    record = "--no-record" not in argv
    levels = LEVELS[:4] if quick else LEVELS
    units = []
    for N in levels:
        r = _last_json(_child("--unit", str(N)))
        units.append(r)
        print(f"(a) N={N}: {r['t']:.2f} s (warm {r['warm']:.2f} s), peak {r['rss']:.0f} MB, "
              f"dim new {r['dim_new']}, {r['orbits']} orbits (max dim {r['maxd']}); core "
              f"T_{r['q']} {r['core']:.3f} s, ratio {r['t'] / r['core']:.1f} "
              f"(warm {r['warm'] / r['core']:.1f})", flush=True)
    rng = random.Random(20261202)
    count = 40 if quick else 120
    sample = sorted(rng.sample(range(1, 10001), count))
    halves = [sample[0::2], sample[1::2]]
    t0 = time.perf_counter()
    procs = [_child("--sample", ",".join(map(str, h))) for h in halves]
    timed = [x for p in procs for x in _last_json(p)]
    sample_wall = time.perf_counter() - t0
    mean = statistics.mean(x["t"] for x in timed)
    proj = mean * 10000 / 2
    A, B = fit([(psi(x["N"]), x["t"]) for x in timed if x["t"] > 0.05] +
               [(psi(u["N"]), u["t"]) for u in units])
    proj_fit = sum(A * psi(N) ** B for N in range(1, 10001)) / 2
    print(f"(b) t ≈ {A:.3g}·ψ(N)^{B:.2f} (least squares over {len(timed) + len(units)} units)")
    print(f"(c) sample of {count} levels, 2 at a time: mean {mean:.2f} s per unit → "
          f"N ≤ 10000 with 2 workers ≈ {proj / 3600:.2f} h (power law: {proj_fit / 3600:.2f} h)"
          f"; sample wall {sample_wall:.0f} s", flush=True)
    real = None if quick else run_real_job(1000)
    if real:
        print(f"(d) nfb run N ≤ 1000, weight 2, 2 workers: {real['wall']:.0f} s "
              f"(exit {real['run_exit']}); nfb verify: exit {real['verify_exit']} "
              f"in {real['verify_wall']:.0f} s")
    if record:
        _write(units, timed, mean, proj, proj_fit, (A, B), real, count)


def _write(units, timed, mean, proj, proj_fit, fitted, real, count) -> None:
    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    load = os.getloadavg()
    A, B = fitted
    lines = [SECTION, "",
             f"Measured {date.today().isoformat()} on {platform.node()} ({os.cpu_count()} cores, "
             f"{cpu}), Python {platform.python_version()}, one thread per process; load "
             f"average at the end {load[0]:.2f}. Command: `python benchmarks/bench_overnight.py`.",
             "Full units: weight 2, trace_bound 1000, exact a_p to 100 for dim ≤ 20, all signs.",
             "",
             "(a) Sample levels, each in a fresh process (unit s), then the same unit again in "
             f"that process with the level caches cleared, median of {REPEAT} (warm s: what a "
             "worker's later units cost, the level-free Heilbronn sets and imports kept); (e) "
             "the core = python-flint's charpoly + factor of T_q (q the first prime ∤ N) on the "
             f"new part, median of {REPEAT}:",
             "",
             "| N | ψ(N) | dim new | orbits | max dim | unit s | warm s | peak RSS MB | core s "
             "| unit/core | warm/core |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    for u in units:
        lines.append(f"| {u['N']} | {psi(u['N'])} | {u['dim_new']} | {u['orbits']} | "
                     f"{u['maxd']} | {u['t']:.2f} | {u['warm']:.2f} | {u['rss']:.0f} | "
                     f"{u['core']:.3f} | {u['t'] / u['core']:.1f} | "
                     f"{u['warm'] / u['core']:.1f} |")
    slow = sorted(timed, key=lambda x: -x["t"])[:5]
    lines += ["",
              f"(b) Growth: t ≈ {A:.3g}·ψ(N)^{B:.2f} seconds (least squares of log t on log ψ).",
              "",
              f"(c) Projection: {count} levels drawn uniformly from 1..10000 (seed 20261202), "
              f"computed by two processes at once like two workers: mean {mean:.2f} s per unit "
              f"(median {statistics.median(x['t'] for x in timed):.2f} s, slowest "
              + ", ".join(f"N={x['N']} {x['t']:.1f} s" for x in slow)
              + f"). Whole job N ≤ 10000 with 2 workers ≈ mean × 10000 / 2 = "
              f"**{proj / 3600:.2f} h** (the power law summed over N ≤ 10000 gives "
              f"{proj_fit / 3600:.2f} h).", ""]
    if real:
        lines += [f"(d) Real job `nfb run --levels 1-1000 --weights 2 --workers 2` end to end "
                  f"(SQLite + Parquet): **{real['wall']:.0f} s** (exit {real['run_exit']}); "
                  f"`nfb verify` on it: exit {real['verify_exit']} in "
                  f"{real['verify_wall']:.0f} s.", "", "```"]
        lines += real["verify_tail"] + ["```", ""]
    write_section(SECTION, lines)


if __name__ == "__main__":
    main(sys.argv[1:])
