"""Search speed on a table of weight 2, N ≤ 2000 (issue 5).

    python benchmarks/bench_search.py                  # synthesise, time, print Markdown
    python benchmarks/bench_search.py --keep DIR       # keep the synthetic table in DIR
    python benchmarks/bench_search.py --table DIR      # time an existing table instead

SYNTHETIC TABLE (timing only — its mathematics is not real). Building a real
weight-2 table up to 2000 takes hours on the reference machine, so for the
timings a table of the right *shape* is synthesised from a real one:

* the real quickstart rows of weight 2 are computed first (levels ≤ 100,
  trace_bound 100; a few seconds), then
* for every level N ≤ 2000 the number of newforms is the true dim S_2^new(Γ0(N))
  (builder/checks/formulas.py), split into orbits like real tables are (a few
  rational orbits — about 2.5 per level, the density of isogeny classes — and the
  rest in one to three larger orbits); each orbit copies the field polynomial
  degree-matched from a real orbit when one exists (else x^d − x − 1), its traces
  are a real orbit's traces extended to trace_bound = 1000 (the overnight job's
  bound) with random values inside Deligne's bound, its Atkin–Lehner signs are
  random over the true primes of N, with consistent Fricke sign and root number,
  and CM/L-value flags are drawn at realistic rates;
* exact eigenvalues for orbits of dim ≤ 20 at the 25 primes ≤ 100.

It is written through the project's own storage code (``record_to_rows`` and
the SQLAlchemy models, so it has exactly the schema and indexes of a real
table) and exported with ``builder.storage.parquet.export``. Each query is timed
through ``builder.tables.find.find`` — what `nfb find` runs — including opening
the source read-only, median of ``--repeat`` runs, on SQLite and on Parquet.
"""

from __future__ import annotations

import argparse
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

MAX_LEVEL = 2000
TRACE_BOUND = 1000
AP_BOUND = 100
DIM_CAP = 20

QUERIES = [
    ("level range 1000-1100", dict(level=(1000, 1100))),
    ("rational, root number −1 (odd rank)", dict(rational=True, root_number=-1)),
    ("AL signs 2:−1, 3:+1", dict(al={2: -1, 3: 1})),
    ("AL pattern = '2+5-' exactly", dict(al_pattern="2+5-")),
    ("Tr a_2 ∈ [−1, 1], rational", dict(trace={2: (-1, 1)}, rational=True)),
    ("Tr a_997 ∈ [−10, 10], level 1500-2000", dict(trace={997: (-10, 10)}, level=(1500, 2000))),
    ("exact a_5 = 0, rational", dict(ap={5: 0}, rational=True)),
    ("a_2 ∈ [−1, 1] all embeddings, dim 2..4", dict(ap={2: (-1, 1)}, dim=(2, 4))),
    ("dim 10..20, Fricke +1", dict(dim=(10, 20), fricke=1)),
    ("CM by −4", dict(cm_disc=-4)),
    ("disc 5..500, dim 2", dict(disc=(5, 500), dim=2)),
    ("L(f,1) = 0, level ≤ 1000", dict(lzero=True, level=(1, 1000))),
]


def real_rows(tmp: Path):
    """The real weight-2 rows, levels ≤ 100 (computed with the library API)."""
    from builder.pipeline.jobs import load_job
    from builder.pipeline.run import run_job
    from builder.tables.source import open_source

    out = tmp / "real"
    job = load_job(
        None,
        {"levels": "1-100", "weights": "2", "trace_bound": 100, "ap_bound": AP_BOUND,
         "dim_cap": DIM_CAP, "out": str(out)},
    )  # fmt: skip
    run_job(job, progress="none")
    with open_source(out) as src:
        return src.newforms()


def synthesise(out: Path, real, seed: int = 20261201) -> dict:
    """Write the SYNTHETIC weight-2 table N ≤ MAX_LEVEL into out/ (SQLite + Parquet)."""
    import numpy as np
    from sqlalchemy import insert

    from builder.checks import formulas as F
    from builder.forms.record import NewformRecord, Params, SpaceRecord
    from builder.storage.db import init_schema, make_engine
    from builder.storage.models import Eigenvalue, Newform, Space
    from builder.storage.parquet import export
    from builder.storage.rows import record_to_rows

    rng = np.random.default_rng(seed)
    by_dim: dict[int, list] = {}
    for r in real.itertuples():
        by_dim.setdefault(int(r.dim), []).append(r)
    primes = F.primes_up_to(AP_BOUND)
    params = Params(TRACE_BOUND, AP_BOUND, DIM_CAP)
    out.mkdir(parents=True, exist_ok=True)
    url = f"sqlite:///{(out / 'newforms.sqlite').resolve()}"
    engine = make_engine(url)
    init_schema(engine, params)
    n_orbits = n_eigen = 0
    spaces, forms, eigen = [], [], []
    for N in range(1, MAX_LEVEL + 1):
        d = F.dim_new(N, 2)
        dims: list[int] = []
        rational = min(d, int(rng.poisson(2.5)))
        dims += [1] * rational
        rest = d - rational
        if rest:
            m = min(rest, int(rng.integers(1, 4)))
            cuts = (
                sorted(rng.choice(np.arange(1, rest), size=m - 1, replace=False)) if m > 1 else []
            )
            bounds = [0, *cuts, rest]
            dims += [int(b - a) for a, b in zip(bounds, bounds[1:], strict=False)]
        dims.sort()
        bad = [p for p, _ in F.factorize(N)] if N > 1 else []
        records = []
        for i, dim in enumerate(dims, start=1):
            src = by_dim.get(dim)
            proto = src[int(rng.integers(len(src)))] if src else None
            poly = list(proto.field_poly) if proto is not None else [-1, -1] + [0] * (dim - 2) + [1]
            base = list(proto.traces) if proto is not None else [dim]
            traces = [int(t) for t in base[:TRACE_BOUND]]
            for n in range(len(traces) + 1, TRACE_BOUND + 1):
                bound = int(dim * F.sigma0(n) * n**0.5)
                traces.append(int(rng.integers(-bound, bound + 1)) if bound else 0)
            traces[0] = dim
            eps = {p: int(rng.choice([-1, 1])) for p in bad}
            fricke = int(np.prod(list(eps.values()))) if eps else 1
            is_cm = bool(dim == 1 and rng.random() < 0.01)
            lz = bool(-fricke == -1) or bool(rng.random() < 0.02)
            ap = None
            if dim <= DIM_CAP:
                ap = {}
                for p in primes:
                    if dim == 1:
                        ap[p] = [str(traces[p - 1])]
                    else:
                        ap[p] = [str(int(rng.integers(-3, 4)))] + [
                            f"{int(rng.integers(-5, 6))}/{int(rng.integers(1, 4))}"
                            for _ in range(dim - 1)
                        ]
            records.append(
                NewformRecord(
                    label=f"{N}w2-{i}", orbit=i, dim=dim, field_poly=poly,
                    field_disc=str(proto.field_disc) if proto is not None else "0",
                    traces=traces, atkin_lehner=eps, fricke_sign=fricke, root_number=-fricke,
                    is_cm=is_cm, cm_disc=-4 if is_cm else None, lvalue_zero=lz,
                    l_ratio=("0" if lz else "1/2") if dim == 1 else None, ap=ap,
                    hecke_poly_2=None,
                )
            )  # fmt: skip
        dc = F.dim_cusp(N, 2)
        rec = SpaceRecord(
            level=N, weight=2, char_index=0, dim_cusp=dc, dim_new=d, dim_old=dc - d,
            dim_eis=F.dim_eisenstein(N, 2), num_orbits=len(records),
            sturm_bound=F.sturm_bound(N, 2), params={"trace_bound": TRACE_BOUND,
            "ap_bound": AP_BOUND, "dim_cap": DIM_CAP}, newforms=records,
            seconds=float(1e-4 * N**1.1),
        )  # fmt: skip
        s, f, e = record_to_rows(rec)
        spaces.append(s)
        forms.extend(f)
        eigen.extend(e)
        n_orbits += len(f)
        n_eigen += len(e)
    with engine.begin() as conn:
        conn.execute(insert(Space.__table__), spaces)
        conn.execute(insert(Newform.__table__), forms)
        for i in range(0, len(eigen), 20000):
            conn.execute(insert(Eigenvalue.__table__), eigen[i : i + 20000])
    export(engine, out / "parquet")
    engine.dispose()
    size = (out / "newforms.sqlite").stat().st_size
    pq = sum(p.stat().st_size for p in (out / "parquet").rglob("*.parquet"))
    return {"units": MAX_LEVEL, "orbits": n_orbits, "eigenvalues": n_eigen,
            "sqlite_mb": size / 2**20, "parquet_mb": pq / 2**20}  # fmt: skip


def time_queries(table: Path, repeat: int) -> list[dict]:
    from builder.tables.find import Filters, find
    from builder.tables.source import open_source

    rows = []
    for name, kw in QUERIES:
        f = Filters.from_kwargs(**kw)
        res = {"query": name}
        for kind in ("sqlite", "parquet"):
            ts = []
            n = None
            for _ in range(repeat):
                t0 = time.perf_counter()
                src = (
                    open_source(table)
                    if kind == "sqlite"
                    else open_source(parquet=table / "parquet")
                )
                with src:
                    df = find(src, f)
                ts.append(time.perf_counter() - t0)
                n = len(df)
            res[kind] = statistics.median(ts)
            res[f"{kind}_rows"] = n
        assert res["sqlite_rows"] == res["parquet_rows"], res
        rows.append(res)
    return rows


def cli_time(table: Path) -> float:
    exe = Path(sys.executable).parent / "nfb"
    t0 = time.perf_counter()
    subprocess.run([str(exe), "find", "--out", str(table), "--al", "2:-1,3:+1", "--format", "csv"],
                   check=True, capture_output=True)  # fmt: skip
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--table", type=Path, help="time this existing table (no synthesis)")
    ap.add_argument("--keep", type=Path, help="write the synthetic table here and keep it")
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="nfb-bench-search-") as tmp:
        tmp = Path(tmp)
        if args.table:
            table, info, synth = args.table, {}, 0.0
        else:
            t0 = time.perf_counter()
            real = real_rows(tmp)
            table = args.keep or tmp / "synthetic"
            info = synthesise(table, real)
            synth = time.perf_counter() - t0
        results = time_queries(table, args.repeat)
        cli = cli_time(table)
    import os

    cpu = platform.processor() or platform.machine()
    print(
        f"Measured {time.strftime('%Y-%m-%d')} on {platform.node()} ({os.cpu_count()} cores, "
        f"{cpu}), Python {platform.python_version()}; load average "
        f"{os.getloadavg()[0]:.2f}. Command: `python benchmarks/bench_search.py`."
    )
    if info:
        print()
        print(
            f"SYNTHETIC table (timing only): weight 2, levels 1–{MAX_LEVEL}, "
            f"{info['orbits']} orbits, {info['eigenvalues']} exact eigenvalues, trace_bound "
            f"{TRACE_BOUND}; SQLite {info['sqlite_mb']:.0f} MB, Parquet "
            f"{info['parquet_mb']:.0f} MB (built in {synth:.0f} s)."
        )
    print()
    print("| query | rows | SQLite s | Parquet s |")
    print("|---|---|---|---|")
    for r in results:
        print(f"| {r['query']} | {r['sqlite_rows']} | {r['sqlite']:.3f} | {r['parquet']:.3f} |")
    worst = max(max(r["sqlite"], r["parquet"]) for r in results)
    print()
    print(f"Slowest query: {worst:.3f} s (open + query + exact post-filter, median of "
          f"{args.repeat}). The whole `nfb find --al 2:-1,3:+1 --format csv` command, Python "
          f"start-up included: {cli:.2f} s.")  # fmt: skip


if __name__ == "__main__":
    main()
