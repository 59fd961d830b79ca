"""Benchmark (issue 7): the units of the character box beyond the absolute lift — all computed?

    python benchmarks/bench_beyond_lift.py              # every such unit, records
    python benchmarks/bench_beyond_lift.py --no-record

The units of the box N·k² ≤ 4000 whose absolute characteristic polynomial cannot be lifted
with the primes ℓ ≡ 1 (mod m) below 2^21 (``bench_characters.beyond_lift``) are split over
Q(χ) only: the whole new part, or its pieces (Atkin–Lehner eigenspaces and CM subspaces,
builder.forms.charforms ``_irreducible_pieces``), each proved irreducible.  This script
splits every one of them (one process, one unit after another) and records how many are
one orbit, how many are cut into pieces, and how many are still refused, with the time of
the split, in the "## Characters beyond the absolute lift (issue 7)" section of
benchmarks/README.md.
"""

from __future__ import annotations

import os
import platform
import statistics
import sys
import time
from datetime import date
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_characters import ROOT, beyond_lift, box_units  # noqa: E402
from readme_section import write_section  # noqa: E402

SECTION = "## Characters beyond the absolute lift (issue 7)"


def main(argv: list[str]) -> None:
    sys.path.insert(0, str(ROOT))
    from builder.characters import character_orbit
    from builder.forms.charforms import CharUnit
    from builder.symbols.space import clear_caches

    beyond = beyond_lift(box_units())
    rows = []
    for N, k, j, order in beyond:
        t0 = time.perf_counter()
        U = CharUnit(N, k, character_orbit(N, j))
        try:
            kind = "pieces" if any(o.piece for o in U.orbits) else "whole"
        except ArithmeticError:
            kind = "refused"
        clear_caches()
        rows.append((N, k, j, order, U.dim_new, kind, time.perf_counter() - t0))
        print(f"  {N}w{k}c{j} (order {order}, dim new {U.dim_new}): {kind} "
              f"{rows[-1][-1]:.1f} s", flush=True)
    count = {kind: [r for r in rows if r[5] == kind]
             for kind in ("whole", "pieces", "refused")}
    times = [r[6] for r in rows]
    summary = (f"{len(rows)} units beyond the absolute lift: {len(count['whole'])} one orbit "
               f"irreducible over Q(χ), {len(count['pieces'])} cut into pieces ("
               + ", ".join(f"{N}w{k}c{j}" for N, k, j, *_ in count["pieces"])
               + f"), {len(count['refused'])} refused"
               + (" (" + ", ".join(f"{N}w{k}c{j}" for N, k, j, *_ in count["refused"]) + ")"
                  if count["refused"] else "")
               + f"; split time median {statistics.median(times):.1f} s, max "
               f"{max(times):.1f} s")
    print(summary)
    if "--no-record" not in argv:
        write_section(SECTION, [
            SECTION, "",
            f"Measured {date.today().isoformat()} on {platform.node()} ({os.cpu_count()} "
            f"cores), Python {platform.python_version()}, one process. Command: "
            "`python benchmarks/bench_beyond_lift.py`.", "",
            summary + ".", ""])


if __name__ == "__main__":
    main(sys.argv[1:])
