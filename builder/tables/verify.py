"""`nfb verify`: re-check every stored space independently of how it was computed.

Nothing here uses the engine (builder/symbols, builder/forms): the dimensions and
the traces are compared with the closed formulas of builder/checks/formulas.py,
and the stored exact eigenvalues are re-multiplied in our own number-field code
(builder/tables/numfield.py). The checks, each reported with the records it
looked at, the records that failed and those it could not check (and why):

units complete        every unit in the database has status 'done' (a 'failed' unit is
                      a hole in the table)
dimensions            dim_cusp = dim S_k(Γ0(N)) ([DS] §3.5, genus formula), dim_new =
                      [Mt] Thm 1, dim_eis = ν∞ (k ≥ 4) or ν∞ − 1 (k = 2),
                      dim_old = dim_cusp − dim_new, sturm_bound = ⌊kψ(N)/12⌋
Σ dim = dim_new       the orbit dimensions of a space add up to its new dimension
orbit records         num_orbits rows numbered 1..r with our labels (a deleted orbit is
                      named), traces[0] = dim, deg field_poly = dim, field_disc =
                      disc(field_poly), al_primes = the primes dividing N
trace formula         Σ_{M|N} σ0(N/M)·Σ_{orbits at M} Tr a_n = Tr T_n on S_k(Γ0(N)) by
                      Eichler–Selberg ([CS] Thm 12.4.11) for n ≤ 30 coprime to N; a
                      table without some divisor level M is *not checked* (reported)
Deligne (traces)      |Tr a_n| ≤ dim·σ0(n)·n^((k−1)/2)
Deligne (exact a_p)   K_f totally real and |σ(a_p)| ≤ 2p^((k−1)/2) for every embedding σ
exact a_p vs traces   one a_p per prime p ≤ ap_bound, dim coordinates each, and
                      Tr_{K/Q}(a_p) = the stored Tr a_p
multiplicativity      Tr(∏ a_{p^e}) = stored Tr a_n for n with ≥ 2 prime factors
Hecke recursion       a_{p^(r+1)} = a_p a_{p^r} − p^(k−1) a_{p^(r−1)} (p ∤ N), a_p^r (p | N):
                      the trace matches the stored Tr a_{p^r}
                      (both from exact a_p; rational orbits also from their traces)
Atkin–Lehner          a_p = −p^(k/2−1)ε_p for p ∥ N and a_p = 0 for p² | N (traces and
                      exact a_p), fricke_sign = ∏ ε_p, root_number = (−1)^(k/2)·fricke,
                      al_pattern agrees with al_primes/al_signs
L-value               root_number = −1 ⇒ L(f, k/2) = 0 (lvalue_zero); l_ratio = 0 ⇔
                      lvalue_zero for rational weight-2 orbits
CM                    a CM orbit of discriminant D has Tr a_p = 0 for p ∤ N with (D/p) = −1

Exit status of `nfb verify`: 0 every check passed; 1 some record failed a check
(each is listed by label); 2 bad input (no table there). ``--strict`` also turns
"not checked" into exit 1.
"""

from __future__ import annotations

import math
import time
from collections import defaultdict
from dataclasses import dataclass, field
from fractions import Fraction

import pandas as pd

from builder.checks import formulas as F
from builder.tables.numfield import NumberField
from builder.tables.source import Source

TRACE_FORMULA_MAX_N = 30

CHECKS = [
    ("units complete", "every unit stored as done"),
    ("dimensions", "dim_cusp, dim_new, dim_eis, dim_old, Sturm bound vs formulas"),
    ("Σ dim = dim_new", "orbit dimensions add up to dim_new"),
    ("orbit records", "orbit count and numbering, traces[0], field polynomial, AL primes"),
    ("trace formula", "Σ σ0(N/M)·Tr a_n over M | N = Eichler–Selberg, n ≤ 30, (n, N) = 1"),
    ("Deligne (traces)", "|Tr a_n| ≤ dim·σ0(n)·n^((k−1)/2)"),
    ("Deligne (exact a_p)", "totally real, |σ(a_p)| ≤ 2p^((k−1)/2) for all σ"),
    ("exact a_p vs traces", "Tr(a_p) of the stored a_p = stored Tr a_p"),
    ("multiplicativity", "Tr(a_m·a_n) = Tr a_mn, (m, n) = 1"),
    ("Hecke recursion", "a_{p^r} from a_p = stored Tr a_{p^r}"),
    ("Atkin–Lehner", "a_p = −p^(k/2−1)ε_p (p ∥ N), a_p = 0 (p² | N), Fricke, root number"),
    ("L-value", "root number −1 ⇒ L(f, k/2) = 0"),
    ("CM", "a_p = 0 at inert primes"),
]


@dataclass
class CheckResult:
    name: str
    description: str
    checked: set = field(default_factory=set)  # record labels looked at
    failures: list[tuple[str, str]] = field(default_factory=list)  # (label, detail)
    not_checked: list[tuple[str, str]] = field(default_factory=list)  # (label, reason)

    @property
    def failed_records(self) -> list[str]:
        return sorted({lab for lab, _ in self.failures}, key=_label_key)

    @property
    def status(self) -> str:
        if self.failures:
            return "FAILED"
        if not self.checked:
            return "not checked" if self.not_checked else "nothing to check"
        return "passed"


@dataclass
class VerifyReport:
    source: str
    results: list[CheckResult]
    units: int
    orbits: int
    seconds: float = 0.0

    @property
    def failures(self) -> list[tuple[str, str, str]]:
        return [(r.name, lab, d) for r in self.results for lab, d in r.failures]

    @property
    def ok(self) -> bool:
        return not self.failures

    @property
    def complete(self) -> bool:
        return not any(r.not_checked for r in self.results)

    def exit_code(self, strict: bool = False) -> int:
        if not self.ok:
            return 1
        if strict and not self.complete:
            return 1
        return 0

    def result(self, name: str) -> CheckResult:
        return next(r for r in self.results if r.name == name)

    def to_dict(self) -> dict:
        return {
            "source": self.source,
            "units": self.units,
            "orbits": self.orbits,
            "ok": self.ok,
            "seconds": round(self.seconds, 3),
            "checks": [
                {
                    "name": r.name,
                    "status": r.status,
                    "checked": len(r.checked),
                    "failed": len(r.failed_records),
                    "not_checked": len(r.not_checked),
                    "failures": [{"label": lab, "detail": d} for lab, d in r.failures],
                    "not_checked_records": [
                        {"label": lab, "reason": d} for lab, d in r.not_checked
                    ],
                }
                for r in self.results
            ],
        }


def _label_key(label: str):
    head, _, orbit = label.partition("-")
    n, _, k = head.partition("w")
    try:
        return (int(k), int(n), int(orbit or 0))
    except ValueError:
        return (0, 0, 0)


def space_label(N: int, k: int) -> str:
    return f"{N}w{k}"


# ----------------------------------------------------------------------------- small helpers


def _kronecker(D: int, p: int) -> int:
    """(D/p) for a prime p (Kronecker symbol)."""
    if p == 2:
        if D % 2 == 0:
            return 0
        return 1 if D % 8 in (1, 7) else -1
    r = pow(D % p, (p - 1) // 2, p)
    return 0 if r == 0 else (1 if r == 1 else -1)


class _Orbit:
    """One stored orbit: its row, its field, its coefficients a_n (exact where known)."""

    def __init__(self, row, eigen: dict[int, list[str]], ap_bound: int) -> None:
        self.row = row
        self.label = row.label
        self.N = int(row.level)
        self.k = int(row.weight)
        self.dim = int(row.dim)
        self.traces = [int(t) for t in row.traces]
        self.eigen = eigen
        self.ap_bound = ap_bound
        self._K: NumberField | None = None
        self._a: dict[int, object] = {}
        self.bad_primes = {p for p, _ in F.factorize(self.N)} if self.N > 1 else set()

    @property
    def K(self) -> NumberField:
        if self._K is None:
            self._K = NumberField(list(self.row.field_poly))
        return self._K

    def ap_exact(self, p: int):
        """a_p ∈ K from the eigenvalues table, or for rational orbits from Tr a_p; else None."""
        if p in self.eigen:
            return self.K.element(self.eigen[p])
        if self.dim == 1 and p <= len(self.traces):
            return self.K.from_int(self.traces[p - 1])
        return None

    def a(self, n: int):
        """a_n ∈ K by multiplicativity and the Hecke recursion, or None if some a_p is unknown."""
        if n in self._a:
            return self._a[n]
        K = self.K
        if n == 1:
            val = K.from_int(1)
        else:
            fac = F.factorize(n)
            if len(fac) > 1:
                val = K.from_int(1)
                for p, e in fac:
                    x = self.a(p**e)
                    if x is None:
                        val = None
                        break
                    val = K.mul(val, x)
            else:
                p, e = fac[0]
                ap = self.ap_exact(p)
                if ap is None:
                    val = None
                elif e == 1:
                    val = ap
                else:
                    prev = self.a(p ** (e - 1))
                    if prev is None:
                        val = None
                    elif p in self.bad_primes:
                        val = K.mul(ap, prev)
                    else:
                        prev2 = self.a(p ** (e - 2))
                        val = K.mul(ap, prev) - prev2 * (p ** (self.k - 1))
        self._a[n] = val
        return val

    def trace_of(self, x) -> Fraction:
        return self.K.trace(x)


# ----------------------------------------------------------------------------- the checks


def verify(src: Source, max_n: int = TRACE_FORMULA_MAX_N) -> VerifyReport:
    """Run every check on the table ``src``; see the module docstring."""
    t0 = time.perf_counter()
    results = {name: CheckResult(name, desc) for name, desc in CHECKS}
    spaces = src.spaces()
    failed = src.failed_units()
    forms = src.newforms()
    eig = src.eigenvalues()

    res = results["units complete"]
    for r in spaces.itertuples():
        res.checked.add(space_label(r.level, r.weight))
    for r in failed.itertuples():
        lab = space_label(r.level, r.weight)
        last = (r.error or "").strip().splitlines()[-1:] or ["no error text"]
        res.checked.add(lab)
        res.failures.append((lab, f"status failed: {last[0][:200]} (rerun `nfb run`)"))

    eigen_by_label: dict[str, dict[int, list[str]]] = defaultdict(dict)
    for r in eig.itertuples():
        eigen_by_label[r.label][int(r.p)] = list(r.coords)

    space_by_unit = {(int(r.level), int(r.weight)): r for r in spaces.itertuples()}
    forms_by_unit: dict[tuple[int, int], list] = defaultdict(list)
    for r in forms.itertuples():
        forms_by_unit[(int(r.level), int(r.weight))].append(r)

    orbits: dict[str, _Orbit] = {}
    for (N, k), rows in forms_by_unit.items():
        sp = space_by_unit.get((N, k))
        ap_bound = int(sp.ap_bound) if sp is not None else 0
        for r in rows:
            orbits[r.label] = _Orbit(r, eigen_by_label.get(r.label, {}), ap_bound)

    for (N, k), sp in sorted(space_by_unit.items(), key=lambda x: (x[0][1], x[0][0])):
        rows = sorted(forms_by_unit.get((N, k), []), key=lambda r: int(r.orbit))
        _check_dimensions(results["dimensions"], sp, N, k)
        _check_orbit_sum(results["Σ dim = dim_new"], results["orbit records"], sp, N, k, rows)
    _check_trace_formula(results["trace formula"], space_by_unit, forms_by_unit, max_n)

    for o in orbits.values():
        _check_deligne_traces(results["Deligne (traces)"], o)
        _check_exact_ap(results["exact a_p vs traces"], results["Deligne (exact a_p)"], o)
        _check_multiplicative(results["multiplicativity"], results["Hecke recursion"], o)
        _check_atkin_lehner(results["Atkin–Lehner"], o)
        _check_lvalue(results["L-value"], o)
        _check_cm(results["CM"], o)

    return VerifyReport(
        source=src.where,
        results=[results[name] for name, _ in CHECKS],
        units=len(spaces) + len(failed),
        orbits=len(forms),
        seconds=time.perf_counter() - t0,
    )


def _check_dimensions(res: CheckResult, sp, N: int, k: int) -> None:
    lab = space_label(N, k)
    res.checked.add(lab)
    expect = {
        "dim_cusp": F.dim_cusp(N, k),
        "dim_new": F.dim_new(N, k),
        "dim_eis": F.dim_eisenstein(N, k),
        "sturm_bound": F.sturm_bound(N, k),
    }
    expect["dim_old"] = expect["dim_cusp"] - expect["dim_new"]
    for name, want in expect.items():
        got = getattr(sp, name)
        if got is None or pd.isna(got) or int(got) != want:
            res.failures.append((lab, f"{name} = {got}, formula gives {want}"))


def _check_orbit_sum(res_sum: CheckResult, res_rec: CheckResult, sp, N, k, rows) -> None:
    lab = space_label(N, k)
    res_sum.checked.add(lab)
    total = sum(int(r.dim) for r in rows)
    if total != int(sp.dim_new):
        res_sum.failures.append(
            (lab, f"orbit dimensions add up to {total}, dim_new = {int(sp.dim_new)}")
        )
    res_rec.checked.add(lab)
    numbers = [int(r.orbit) for r in rows]
    expected_n = int(sp.num_orbits)
    if len(rows) != expected_n:
        missing = [f"{N}w{k}-{i}" for i in range(1, expected_n + 1) if i not in numbers]
        what = f"; missing {', '.join(missing)}" if missing else ""
        res_rec.failures.append((lab, f"num_orbits = {expected_n} but {len(rows)} stored{what}"))
    elif numbers != list(range(1, len(rows) + 1)):
        missing = [f"{N}w{k}-{i}" for i in range(1, max(numbers) + 1) if i not in numbers]
        res_rec.failures.append(
            (lab, f"orbits numbered {numbers}, not 1..{len(rows)}; missing {', '.join(missing)}")
        )
    primes_N = [p for p, _ in F.factorize(N)] if N > 1 else []
    cap = getattr(sp, "dim_cap", None)
    cap = 10**9 if cap is None or pd.isna(cap) else int(cap)
    for r in rows:
        olab = r.label
        res_rec.checked.add(olab)
        problems = []
        if olab != f"{N}w{k}-{int(r.orbit)}":
            problems.append(f"label {olab!r} is not {N}w{k}-{int(r.orbit)}")
        if not r.traces or int(r.traces[0]) != int(r.dim):
            problems.append(f"traces[0] = {r.traces[0] if r.traces else None} ≠ dim {r.dim}")
        poly = list(r.field_poly)
        if len(poly) - 1 != int(r.dim):
            problems.append(f"field_poly of degree {len(poly) - 1} ≠ dim {r.dim}")
        else:
            import flint

            if r.field_disc is None or (isinstance(r.field_disc, float) and pd.isna(r.field_disc)):
                if int(r.dim) <= int(cap):
                    problems.append(f"field_disc missing for dim {r.dim} ≤ dim_cap {cap}")
            elif str(flint.fmpz_poly(poly).discriminant() if len(poly) > 2 else 1) != str(
                    r.field_disc) and int(r.dim) > 1:
                disc = int(flint.fmpz_poly(poly).discriminant())
                problems.append(f"field_disc {r.field_disc} ≠ disc(field_poly) = {disc}")
        if [int(p) for p in r.al_primes] != primes_N:
            problems.append(f"al_primes {list(r.al_primes)} ≠ primes of N {primes_N}")
        for pr in problems:
            res_rec.failures.append((olab, pr))


def _check_trace_formula(res: CheckResult, space_by_unit, forms_by_unit, max_n: int) -> None:
    stored_traces: dict[tuple[int, int], tuple[list[list[int]], int]] = {}
    for (N, k), sp in space_by_unit.items():
        rows = forms_by_unit.get((N, k), [])
        tb = min([len(r.traces) for r in rows], default=int(sp.trace_bound))
        stored_traces[(N, k)] = ([list(r.traces) for r in rows], tb)
    for N, k in sorted(space_by_unit, key=lambda u: (u[1], u[0])):
        lab = space_label(N, k)
        divs = F.divisors(N)
        missing = [M for M in divs if (M, k) not in space_by_unit]
        if missing:
            res.not_checked.append(
                (
                    lab,
                    f"divisor levels {', '.join(map(str, missing))} of weight {k} not in the table",
                )
            )
            continue
        bound = min(max_n, min(stored_traces[(M, k)][1] for M in divs))
        ns = [n for n in range(1, bound + 1) if math.gcd(n, N) == 1]
        if not ns:
            res.not_checked.append((lab, "no n coprime to N within the stored traces"))
            continue
        res.checked.add(lab)
        bad = []
        for n in ns:
            total = 0
            for M in divs:
                mult = F.sigma0(N // M)
                total += mult * sum(int(t[n - 1]) for t in stored_traces[(M, k)][0])
            want = F.trace_hecke(N, k, n)
            if total != want:
                bad.append(f"n={n}: table {total}, formula {want}")
        if bad:
            res.failures.append(
                (lab, "Tr T_n " + "; ".join(bad[:6]) + (" …" if len(bad) > 6 else ""))
            )


def _check_deligne_traces(res: CheckResult, o: _Orbit) -> None:
    res.checked.add(o.label)
    bad = [n for n, t in enumerate(o.traces, start=1) if not F.deligne_trace_ok(t, o.dim, n, o.k)]
    if bad:
        n = bad[0]
        res.failures.append(
            (
                o.label,
                f"|Tr a_{n}| = {abs(o.traces[n - 1])} above dim·σ0(n)·n^((k−1)/2)"
                + (f" (also n = {bad[1:6]})" if len(bad) > 1 else ""),
            )
        )


def _check_exact_ap(res_tr: CheckResult, res_del: CheckResult, o: _Orbit) -> None:
    if not bool(o.row.has_ap):
        if o.eigen:
            res_tr.failures.append((o.label, "has_ap is false but eigenvalues are stored"))
        else:
            res_tr.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
            res_del.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
        return
    res_tr.checked.add(o.label)
    res_del.checked.add(o.label)
    want_primes = F.primes_up_to(o.ap_bound)
    if sorted(o.eigen) != want_primes:
        miss = sorted(set(want_primes) - set(o.eigen))
        extra = sorted(set(o.eigen) - set(want_primes))
        res_tr.failures.append(
            (o.label, f"eigenvalues for primes ≤ {o.ap_bound}: missing {miss}, unexpected {extra}")
        )
    K = o.K
    if not K.is_totally_real():
        res_del.failures.append(
            (o.label, f"field polynomial {o.row.field_poly} is not totally real")
        )
        return
    for p in sorted(o.eigen):
        coords = o.eigen[p]
        if len(coords) != o.dim:
            res_tr.failures.append((o.label, f"a_{p} has {len(coords)} coordinates, dim {o.dim}"))
            continue
        a = K.element(coords)
        if p <= len(o.traces):
            tr = K.trace(a)
            if tr != o.traces[p - 1]:
                res_tr.failures.append(
                    (
                        o.label,
                        f"Tr(a_{p}) of the stored a_{p} is {tr}, stored Tr a_{p} = "
                        f"{o.traces[p - 1]}",
                    )
                )
        if not K.all_abs_le(a, 4 * p ** (o.k - 1)):
            res_del.failures.append(
                (o.label, f"a_{p} = {coords} has an embedding above 2·{p}^(({o.k}−1)/2)")
            )


def _check_multiplicative(res_mul: CheckResult, res_hecke: CheckResult, o: _Orbit) -> None:
    if not o.eigen and o.dim != 1:
        res_mul.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
        res_hecke.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
        return
    if o.eigen and len(o.eigen.get(2, [None] * o.dim)) != o.dim:
        return  # malformed coordinates are reported by "exact a_p vs traces"
    bad_mul, bad_hecke = [], []
    did_mul = did_hecke = False
    for n in range(4, len(o.traces) + 1):
        fac = F.factorize(n)
        if len(fac) == 1 and fac[0][1] == 1:
            continue
        try:
            x = o.a(n)
        except ValueError:  # coordinates of a wrong length
            return
        if x is None:
            continue
        tr = o.trace_of(x)
        if len(fac) > 1:
            did_mul = True
            if tr != o.traces[n - 1]:
                bad_mul.append(f"n={n}: Tr(∏ a_(p^e)) = {tr}, stored {o.traces[n - 1]}")
        else:
            did_hecke = True
            if tr != o.traces[n - 1]:
                bad_hecke.append(f"n={n}: recursion gives {tr}, stored {o.traces[n - 1]}")
    if did_mul:
        res_mul.checked.add(o.label)
    if did_hecke:
        res_hecke.checked.add(o.label)
    if bad_mul:
        res_mul.failures.append(
            (o.label, "; ".join(bad_mul[:4]) + (" …" if len(bad_mul) > 4 else ""))
        )
    if bad_hecke:
        res_hecke.failures.append(
            (o.label, "; ".join(bad_hecke[:4]) + (" …" if len(bad_hecke) > 4 else ""))
        )


def _check_atkin_lehner(res: CheckResult, o: _Orbit) -> None:
    res.checked.add(o.label)
    r = o.row
    primes = [int(p) for p in r.al_primes]
    signs = [int(s) for s in r.al_signs]
    problems = []
    if len(primes) != len(signs) or any(s not in (1, -1) for s in signs):
        res.failures.append((o.label, f"al_signs {signs} do not match al_primes {primes}"))
        return
    eps = dict(zip(primes, signs, strict=True))
    pattern = "".join(f"{p}{'+' if s > 0 else '-'}" for p, s in zip(primes, signs, strict=True))
    if r.al_pattern != pattern:
        problems.append(f"al_pattern {r.al_pattern!r} ≠ {pattern!r} from al_primes/al_signs")
    fricke = math.prod(signs) if signs else 1
    if int(r.fricke_sign) != fricke:
        problems.append(f"fricke_sign {int(r.fricke_sign):+d} ≠ ∏ ε_p = {fricke:+d}")
    want_root = (-1) ** (o.k // 2) * int(r.fricke_sign)
    if int(r.root_number) != want_root:
        problems.append(
            f"root_number {int(r.root_number):+d} ≠ (−1)^(k/2)·fricke_sign = {want_root:+d}"
        )
    for p, e in F.factorize(o.N) if o.N > 1 else ():
        if e == 1:
            want = -(p ** (o.k // 2 - 1)) * eps.get(p, 0)
            what = f"−{p}^{o.k // 2 - 1}·ε_{p} = {want}"
        else:
            want = 0
            what = f"0 ({p}² | N)"
        if p <= len(o.traces) and o.traces[p - 1] != o.dim * want:
            problems.append(f"Tr a_{p} = {o.traces[p - 1]}, expected {o.dim}·({what})")
        if p in o.eigen:
            a = o.K.element(o.eigen[p])
            if o.K.rational_value(a) != want:
                problems.append(f"a_{p} = {o.eigen[p]}, expected {what}")
    for pr in problems:
        res.failures.append((o.label, pr))


def _check_lvalue(res: CheckResult, o: _Orbit) -> None:
    r = o.row
    lz = None if r.lvalue_zero is None or pd.isna(r.lvalue_zero) else bool(r.lvalue_zero)
    if int(r.root_number) == -1:
        res.checked.add(o.label)
        if lz is not True:
            res.failures.append(
                (o.label, f"root number −1 but lvalue_zero = {lz} (the central value must vanish)")
            )
    elif lz is None:
        res.not_checked.append((o.label, "lvalue_zero not decided (null)"))
    else:
        res.checked.add(o.label)
    ratio = r.l_ratio if isinstance(r.l_ratio, str) else None
    if ratio is not None and lz is not None and (Fraction(ratio) == 0) != lz:
        res.failures.append((o.label, f"l_ratio {ratio} disagrees with lvalue_zero = {lz}"))


def _check_cm(res: CheckResult, o: _Orbit) -> None:
    r = o.row
    if not bool(r.is_cm):
        return
    res.checked.add(o.label)
    if r.cm_disc is None or pd.isna(r.cm_disc):
        res.failures.append((o.label, "is_cm without cm_disc"))
        return
    D = int(r.cm_disc)
    bad = [
        p
        for p in F.primes_up_to(len(o.traces))
        if o.N % p and _kronecker(D, p) == -1 and o.traces[p - 1] != 0
    ]
    if bad:
        res.failures.append((o.label, f"CM by {D} but Tr a_p ≠ 0 at inert p = {bad[:8]}"))
