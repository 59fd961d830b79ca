"""Where a weight-2 unit's time goes: median phase times of warm units.

Usage: python benchmarks/bench_phases.py [--root DIR] N [N ...]

Phases (builder.forms.unit._compute, split apart): space = the Manin presentation of
level N; new = Ann(Old) (lower-level spaces, transfer, W_N and the exact rref of the old
conditions, of which ``rref``); split = sign pieces, charpolys, factors; traces = Tr a_n
for n ≤ trace_bound; orbit = exact a_p, field polynomial, signs, CM, L-data.  Each level
runs three times in this process after one warm-up unit (level caches cleared between),
with one BLAS thread; the medians are printed.  ``--root`` imports the builder from
another checkout (e.g. a git worktree of an older commit), so two versions can be run
alternately in the same minutes.  The table in benchmarks/README.md ("where a unit's time
goes") is written by hand from this output.
"""

from __future__ import annotations

import gc
import os
import statistics
import sys
import time
from pathlib import Path

for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(var, "1")

REPEAT = 3


def main(argv: list[str]) -> None:
    root = Path(__file__).resolve().parent.parent
    if argv[:1] == ["--root"]:
        root, argv = Path(argv[1]).resolve(), argv[2:]
    sys.path.insert(0, str(root))
    import builder.forms.newspace as newspace_mod
    import builder.linalg_modp as linalg
    from builder.forms import unit
    from builder.forms.eigen import EigenForm, eigen_system
    from builder.forms.record import Params
    from builder.symbols.space import clear_caches, cuspidal_space

    params = Params()
    unit.compute(997, 2, params)  # warm-up: imports and the level-free Heilbronn sets
    spent = [0.0]
    exact_rref = linalg.exact_rref

    def timed_rref(*a, **k):
        t = time.perf_counter()
        try:
            return exact_rref(*a, **k)
        finally:
            spent[0] += time.perf_counter() - t

    newspace_mod.exact_rref = timed_rref
    print(f"builder from {root}")
    for N in (int(x) for x in argv):
        runs = []
        for _ in range(REPEAT):
            clear_caches()
            gc.collect()
            spent[0] = 0.0
            T = {}
            t0 = t = time.perf_counter()
            S = cuspidal_space(N, 2, 1)
            T["space"] = time.perf_counter() - t
            t = time.perf_counter()
            V = newspace_mod.NewSpace(S)
            T["new"] = time.perf_counter() - t
            T["rref"] = spent[0]
            t = time.perf_counter()
            orbits = V.orbits()
            T["split"] = time.perf_counter() - t
            eigs = [EigenForm(V, o) for o in orbits]
            t = time.perf_counter()
            traces = eigen_system(V).traces(params.trace_bound) if eigs else []
            T["traces"] = time.perf_counter() - t
            t = time.perf_counter()
            cms = unit.cm_discriminants(eigs)
            for E, tr, cm in zip(eigs, traces, cms, strict=True):
                unit._orbit_data(E, tr, cm, params)
            T["orbit"] = time.perf_counter() - t
            T["total"] = time.perf_counter() - t0
            runs.append(T)
            del S, V, orbits, eigs
        med = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
        print(N, " ".join(f"{k}={v:.2f}" for k, v in med.items()), flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
