"""Benchmark (issue 7): every character orbit in the box N·k² ≤ 4000 — how long with 2 workers?

    python benchmarks/bench_characters.py               # 240 + 40 units, records
    python benchmarks/bench_characters.py --count 20 --count-long 4 --cap 120 --no-record

The box: every weight k ≥ 2 and level N with N·k² ≤ 4000, every Galois orbit of Dirichlet
characters mod N with χ(−1) = (−1)^k (the trivial one included), full units with the
default bounds of a job (trace_bound 1000, exact a_p to 100 for orbits of dimension ≤ 20).
Each unit runs in a fresh process, timed after the level-free Heilbronn matrices for the
trace bound are built (a worker builds them once, for all its units).
The units are split in two strata — those whose CM proof could run to a large Sturm
bound (``cm_suspects``), and the rest — and a uniform random sample of each (fixed
seed) is computed by two processes at once, as the two workers of a real run share the
machine; Σ units_s × mean_s / 2 projects the wall time of the whole box with 2 workers
(stratified sampling: the few long units no longer swing a small uniform sample), and
(Σ units_s² × var_s / n_s)^(1/2) / 2 is its standard error: a few slow units of large
character order carry much of the mean, so the sample is large and the error printed.
Numbers go to the "## Characters (issue 7)" section of benchmarks/README.md with the
machine and the date.
"""

from __future__ import annotations

import json
import os
import platform
import random
import statistics
import subprocess
import sys
import threading
import time
from datetime import date
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from readme_section import write_section  # noqa: E402

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SECTION = "## Characters (issue 7)"
BOX = 4000
SEED = 20261202
LONG_PROOF = 3000  # CM-proof bound above which a unit is in the stratum of long proofs
ENV = {**os.environ, "PYTHONHASHSEED": "0", "OPENBLAS_NUM_THREADS": "1",
       "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def box_units() -> list[tuple[int, int, int, int]]:
    """(N, k, j, order) for every unit of the box, parity matched."""
    sys.path.insert(0, str(ROOT))
    from builder.pipeline.jobs import character_table

    out = []
    k = 2
    while 4 * k * k <= 4 * BOX:
        for N in range(1, BOX // (k * k) + 1):
            for j, order, parity in character_table(N):
                if (parity == 1) == (k % 2 == 0):
                    out.append((N, k, j, order))
        k += 1
    return out


def beyond_lift(units: list) -> list:
    """The units whose absolute charpoly cannot be lifted with the primes ℓ ≡ 1 (mod m)
    below 2^21 (``CharUnit.check_liftable``): computed only when their new part is
    irreducible over Q(χ) (one orbit), refused otherwise."""
    sys.path.insert(0, str(ROOT))
    from builder.characters import character_orbit
    from builder.forms.charforms import CharUnit

    out = []
    for N, k, j, order in units:
        if order < 3:
            continue  # φ(m) = 1: the trivial and quadratic units are always liftable
        U = CharUnit(N, k, character_orbit(N, j))
        if U.dim_new:
            try:
                U.check_liftable()
            except ArithmeticError:
                out.append((N, k, j, order))
    return out


def cm_suspects(units: list) -> dict:
    """The units where a CM orbit, if there is one, costs a long proof: some fundamental
    D < 0 with |D| | N, D² ∤ N and χ·χ_D of conductor dividing N/|D| — the nebentypus of
    a theta series of Q(√D) of level N (common practice: θ_ψ has level |D|·N𝔪 and
    character χ_D·ψ|_Z).  Their CM proof used to run to the Sturm bound of lcm(N, D²);
    since the Hecke-character count (builder.forms.hecke_characters) it stops after a
    few inert primes, and the stratum is kept to show that it no longer costs more.
    Returns unit ↦ the largest such bound; those with a bound above ``LONG_PROOF`` are
    sampled as a stratum of their own."""
    sys.path.insert(0, str(ROOT))
    from math import gcd

    from builder.arith import sturm_bound
    from builder.characters import character_orbits
    from builder.forms.unit import _fundamental_discriminants_dividing, kronecker

    out = {}
    for N, k, j, order in units:
        if order == 1:
            continue  # χ_D alone has conductor |D|, which divides N/|D| only if D² | N
        chi = character_orbits(N)[j]
        for D in _fundamental_discriminants_dividing(N):
            M = N // -D
            if M % -D == 0:
                continue  # D² | N: the bound is Sturm(N)
            if all(gcd(n, N) > 1 or (chi.exponent(n) == 0 and kronecker(D, n) == 1)
                   or (2 * chi.exponent(n) == order and kronecker(D, n) == -1)
                   for n in range(1 + M, N, M)):
                B = sturm_bound(N * D * D // gcd(N, D * D), k)
                out[(N, k, j, order)] = max(B, out.get((N, k, j, order), 0))
    return out


def _unit(N: int, k: int, j: int) -> dict:
    sys.path.insert(0, str(ROOT))
    from builder.arith import primes_up_to
    from builder.forms.record import Params, compute_unit
    from builder.symbols.heilbronn import hecke_matrices

    for p in primes_up_to(Params().trace_bound):  # level-free: a worker builds them once
        hecke_matrices(p)
    t0 = time.perf_counter()
    R = compute_unit(N, k, Params(), char_index=j)
    return {"t": time.perf_counter() - t0, "dim_new": R.dim_new, "orbits": R.num_orbits,
            "maxd": max([f.dim for f in R.newforms] or [0])}


def _run_half(units: list, cap: float, out: list) -> None:
    """One worker: the units one after another, each in a fresh process stopped at ``cap``
    seconds (then counted as ``cap``: the projection is a lower bound)."""
    for N, k, j, order in units:
        row = {"N": N, "k": k, "j": j, "order": order, "refused": False}
        try:
            r = subprocess.run([sys.executable, __file__, "--unit", f"{N},{k},{j}"],
                               capture_output=True, text=True, env=ENV, timeout=cap)
            if r.returncode and "beyond the absolute method" in r.stderr:
                row.update(t=None, dim_new=None, orbits=None, maxd=None, capped=False,
                           refused=True)
            elif r.returncode:
                raise SystemExit(f"{N}w{k}c{j} failed:\n{r.stderr}")
            else:
                row.update(json.loads(r.stdout.strip().splitlines()[-1]), capped=False)
        except subprocess.TimeoutExpired:
            row.update(t=cap, dim_new=None, orbits=None, maxd=None, capped=True)
        print(f"  {N}w{k}c{j} (order {order}): "
              + ("refused" if row.get("refused") else f"{row['t']:.2f} s")
              + (" (capped)" if row["capped"] else ""), flush=True)
        out.append(row)


def main(argv: list[str]) -> None:
    if argv and argv[0] == "--unit":
        print(json.dumps(_unit(*map(int, argv[1].split(",")))))
        return
    count = int(argv[argv.index("--count") + 1]) if "--count" in argv else 240
    count_long = int(argv[argv.index("--count-long") + 1]) if "--count-long" in argv else 40
    cap = float(argv[argv.index("--cap") + 1]) if "--cap" in argv else 600.0
    record = "--no-record" not in argv
    units = box_units()
    bounds = cm_suspects(units)
    long_units = sorted(u for u, b in bounds.items() if b > LONG_PROOF)
    rest = sorted(set(units) - set(long_units))
    rng = random.Random(SEED)
    strata = {"rest": (rest, sorted(rng.sample(rest, count))),
              "long": (long_units, sorted(rng.sample(long_units, count_long)))}
    t0 = time.perf_counter()
    results: dict[str, list[dict]] = {}
    for name, (_, sample) in strata.items():
        timed: list[dict] = []
        threads = [threading.Thread(target=_run_half, args=(h, cap, timed))
                   for h in (sample[0::2], sample[1::2])]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        results[name] = timed
    wall = time.perf_counter() - t0
    beyond = beyond_lift(units)
    refused = [x for r in results.values() for x in r if x.get("refused")]
    stats = {}
    for name, timed in results.items():
        ts = [x["t"] for x in timed if not x.get("refused")]
        stats[name] = (len(strata[name][0]), statistics.mean(ts), statistics.median(ts),
                       sum(1 for x in timed if x["capped"]), statistics.variance(ts) / len(ts))
    proj = sum(size * mean for size, mean, *_ in stats.values()) / 2
    # the standard error of the stratified estimate (sampling without the finite correction)
    err = sum(size * size * v for size, _, _, _, v in stats.values()) ** 0.5 / 2
    trivial = sum(1 for u in units if u[2] == 0)
    capped = sum(s[3] for s in stats.values())
    print(f"box N·k² ≤ {BOX}: {len(units)} units ({trivial} trivial character), "
          f"{len(beyond)} beyond the absolute lift, {len(long_units)} with a CM proof that may "
          f"run past Sturm bound {LONG_PROOF}; "
          + "; ".join(f"stratum {n}: {s[0]} units, sample {len(results[n])}, mean {s[1]:.2f} s, "
                      f"median {s[2]:.2f} s" for n, s in stats.items())
          + f"; {len(refused)} refused, {capped} capped at {cap:.0f} s → 2 workers "
          f"{'≥ ' if capped else '≈ '}{proj / 3600:.2f} h ± {err / 3600:.2f} h (one standard "
          f"error); sample wall {wall:.0f} s")
    if record:
        _write(units, results, stats, (proj, err), wall, trivial, cap, capped, beyond, refused)


def _write(units, results, stats, projection, wall, trivial, cap, capped, beyond,
           refused) -> None:
    proj, err = projection
    load = os.getloadavg()
    timed = [x for r in results.values() for x in r if not x.get("refused")]
    slow = sorted(timed, key=lambda x: -x["t"])[:6]
    by_order: dict[str, list[float]] = {}
    for x in results["rest"]:
        if x.get("refused"):
            continue
        key = "1" if x["order"] == 1 else "2" if x["order"] == 2 else "3–6" if x[
            "order"] <= 6 else "> 6"
        by_order.setdefault(key, []).append(x["t"])
    rest, long_ = stats["rest"], stats["long"]
    lines = [SECTION, "",
             f"Measured {date.today().isoformat()} on {platform.node()} ({os.cpu_count()} cores)"
             f", Python {platform.python_version()}, one thread per process; load average at "
             f"the end {load[0]:.2f}. Command: `python benchmarks/bench_characters.py`.", "",
             f"The box N·k² ≤ {BOX}, every character orbit with χ(−1) = (−1)^k: "
             f"**{len(units)} units** ({trivial} with the trivial character). Full units "
             f"(traces to 1000, exact a_p to 100 for dim ≤ 20). {len(beyond)} of them are "
             "beyond the absolute lift (their absolute charpoly, degree φ(m)·dim_new, "
             "cannot be lifted with the primes ℓ ≡ 1 (mod m) below 2^21, e.g. "
             + ", ".join(f"{N}w{k}c{j}" for N, k, j, _ in beyond[:3])
             + "): they are split over Q(χ) only — the new part whole, or cut into "
             "Atkin–Lehner eigenspaces and CM subspaces, each proved irreducible — "
             "and refused if a piece is not (all of them computed: the section below, "
             "`bench_beyond_lift.py`).", "",
             "Two strata, sampled separately (seed "
             f"{SEED}) and computed two at a time, each unit in a fresh process stopped after "
             f"{cap:.0f} s: **long** = the {long_[0]} units where a CM orbit, if any, needed "
             "(before the Hecke-character count) a_p = 0 at every inert prime up to the "
             "Sturm bound of lcm(N, D²) > "
             f"{LONG_PROOF} (some D < 0 with D² ∤ N and χ·χ_D of conductor dividing N/|D|: "
             f"`cm_suspects`), **rest** = the other {rest[0]}. Stratum rest: "
             f"{len(results['rest'])} units, mean {rest[1]:.2f} s, median {rest[2]:.2f} s; "
             f"stratum long: {len(results['long'])} units, mean {long_[1]:.2f} s, median "
             f"{long_[2]:.2f} s; {len(refused)} refused (left out), {capped} capped "
             f"(counted as {cap:.0f} s); sample wall {wall:.0f} s. Projected box with 2 "
             "workers ≈ (units_rest × mean_rest + units_long × mean_long) / 2 = "
             f"**{proj / 3600:.2f} h**" + (" (a lower bound: capped units)" if capped else "")
             + f", standard error of the stratified estimate ± {err / 3600:.2f} h "
             "(goal ≤ 8 h).", "",
             "| stratum rest, character order | sample units | median s | mean s |",
             "|---|---|---|---|"]
    for key in ("1", "2", "3–6", "> 6"):
        if key in by_order:
            ts = by_order[key]
            lines.append(f"| {key} | {len(ts)} | {statistics.median(ts):.2f} | "
                         f"{statistics.mean(ts):.2f} |")
    lines += ["", "Stratum long: " + ", ".join(
        f"{x['N']}w{x['k']}c{x['j']} {x['t']:.1f} s" + (" capped" if x["capped"] else "")
        for x in results["long"] if not x.get("refused")) + ".", "",
        "Slowest overall: " + ", ".join(
        f"{x['N']}w{x['k']}c{x['j']} (order {x['order']}, dim new {x['dim_new']}) {x['t']:.1f} s"
        + (" capped" if x["capped"] else "")
        for x in slow) + ".", ""]
    write_section(SECTION, lines)


if __name__ == "__main__":
    main(sys.argv[1:])
