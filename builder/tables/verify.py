"""`nfb verify`: re-check every stored space independently of how it was computed.

Nothing here uses the engine (builder/symbols, builder/forms): the dimensions and
the traces are compared with the closed formulas of builder/checks/formulas.py
(trivial character) and builder/checks/char_formulas.py (a Dirichlet character χ,
whose Galois orbits come from builder/characters.py), and the stored exact
eigenvalues are re-multiplied in our own number-field code
(builder/tables/numfield.py). A unit is (N, k, j), j the index of the character
orbit [χ] at level N (0 = trivial); its space S_k(N, χ) has dimensions over Q(χ),
its orbits absolute dimensions [K_f : Q] = rel_dim·[Q(χ) : Q] and traces Tr_{K_f/Q}
(the sum over all conjugates, χ^a included). The checks, each reported with the
records it looked at, the records that failed and those it could not check (and why):

units complete        every unit in the database has status 'done' (a 'failed' unit is
                      a hole in the table)
dimensions            χ = 1: dim_cusp = dim S_k(Γ0(N)) ([DS] §3.5, genus formula),
                      dim_new = [Mt] Thm 1, dim_eis = ν∞ (k ≥ 4) or ν∞ − 1 (k = 2);
                      χ ≠ 1: dim_cusp, dim_eis by Cohen–Oesterlé ([CO] Thm 1, [CS] ch. 7),
                      dim_new by Martin's decomposition ([Mt]); always dim_old = dim_cusp −
                      dim_new, sturm_bound = ⌊kψ(N)/12⌋, and the stored char_order,
                      char_conductor, char_parity, char_number, char_degree are those of
                      builder/characters for (N, j) (1, 1, 1, 1, 1 for j = 0); when
                      χ(−1) ≠ (−1)^k the space must be 0
Σ dim = dim_new       the orbit dimensions of a space add up to [Q(χ) : Q]·dim_new
orbit records         num_orbits rows numbered 1..r with our labels ({N}w{k}[c{j}]-{i}; a
                      deleted orbit is named), traces[0] = dim, deg field_poly = dim (χ ≠ 1:
                      or empty for a new part split as one orbit over Q(χ), then the
                      unit's only orbit, without exact a_p and hecke_poly_2),
                      field_disc = disc(field_poly), rel_dim·[Q(χ) : Q] = dim, char_order;
                      χ = 1: al_primes = the primes dividing N; χ ≠ 1: al_primes,
                      al_signs empty, al_pattern "", fricke_sign, root_number,
                      lvalue_zero, l_ratio null (not defined for a character)
trace formula         Σ_{cond(χ) | M | N} σ0(N/M)·Σ_{orbits at (M, χ_M)} Tr a_n
                      = Σ_a Tr T_n on S_k(N, χ^a) by Eichler–Selberg ([CS] Thm 12.4.11)
                      for n ≤ 30 coprime to N: the old space from level M is σ0(N/M)
                      copies of the new space at M ([Mt]; Atkin–Lehner–Li), χ_M the
                      character mod M induced by the primitive character behind χ; a table
                      without one of those units (M, χ_M) is *not checked* (reported)
Deligne (traces)      |Tr a_n| ≤ dim·σ0(n)·n^((k−1)/2)
Deligne (exact a_p)   |σ(a_p)| ≤ 2p^((k−1)/2) for every complex embedding σ ([De]); K_f
                      totally real (χ = 1), totally real or CM (χ ≠ 1: K_f ⊃ Q(χ); ā_p =
                      χ̄(p)a_p ([DS] Thm 5.5.3) makes complex conjugation an automorphism
                      ι of K_f, found and proved exactly in numfield.py), decided exactly
                      on a_p·ι(a_p)
exact a_p vs traces   one a_p per prime p ≤ ap_bound, dim coordinates each, and
                      Tr_{K/Q}(a_p) = the stored Tr a_p
multiplicativity      Tr(∏ a_{p^e}) = stored Tr a_n for n with ≥ 2 prime factors (χ ≠ 1:
                      wherever every a_{p^e} is known exactly, e.g. n squarefree)
Hecke recursion       a_{p^(r+1)} = a_p a_{p^r} − χ(p)p^(k−1) a_{p^(r−1)} (p ∤ N), a_p^r
                      (p | N) ([DS] Prop 5.3.1): the trace matches the stored Tr a_{p^r}
                      (both from exact a_p; rational orbits also from their traces);
                      χ ≠ 1: Tr(a_p²) − Tr a_{p²} = p^(k−1)·rel_dim·c_m(e(p)) for p ∤ N,
                      p² ≤ trace_bound, χ(p) = ζ_m^e(p), c_m(e) = Tr_{Q(ζ_m)/Q} ζ_m^e the
                      Ramanujan sum ([Ap] §8.3); and u = a_p/ι(a_p) (= χ(p), [DS] Thm
                      5.5.3) has u^m = 1, Tr u = rel_dim·c_m(e(p)); the recursion runs with
                      χ(p) = u where a_p ≠ 0
Atkin–Lehner          χ = 1: a_p = −p^(k/2−1)ε_p for p ∥ N and a_p = 0 for p² | N (traces and
                      exact a_p), fricke_sign = ∏ ε_p, root_number = (−1)^(k/2)·fricke,
                      al_pattern agrees with al_primes/al_signs.  χ ≠ 1, p | N, p^r ∥ N,
                      p^s ∥ cond(χ) ([Li] Thm 3, [Mi] Thm 4.6.17): s = r ⇒ |σ(a_p)|² =
                      p^(k−1) (exact: a_p·ι(a_p) = p^(k−1)); r = 1, s = 0 ⇒ a_p² =
                      χ'(p)p^(k−2), χ' = χ mod N/p (exact: (a_p²)^m = p^(m(k−2)) and
                      Tr(a_p²) = p^(k−2)·rel_dim·c_m(e'(p)); traces: the same for Tr a_{p²}
                      = Tr a_p²); r ≥ 2, s < r ⇒ a_p = 0 (Tr a_p = 0 and exact a_p = 0).
                      χ ≠ 1, s = 0 (orbits with exact a_p): the pseudo-eigenvalue w of
                      W_{p^r} is stored, w²/p^(r(k−2)) = χ̄'(p^r) (a root of unity of
                      order | m with the Ramanujan-sum trace), w·w̄ = p^(r(k−2)), and
                      w·a_p = −p^(k−2) for r = 1 ([AL78] §1–2)
L-value               root_number = −1 ⇒ L(f, k/2) = 0 (lvalue_zero); l_ratio = 0 ⇔
                      lvalue_zero for rational weight-2 orbits (χ = 1 only)
CM                    a CM orbit of discriminant D has Tr a_p = 0 for p ∤ N with (D/p) = −1

Sources: [DS] Diamond–Shurman, A First Course in Modular Forms (GTM 228); [Mt] G. Martin,
J. Number Theory 112 (2005); [CO] Cohen–Oesterlé, LNM 627 (1977); [CS] Cohen–Strömberg,
Modular Forms: A Classical Approach (GSM 179); [AL78] A. O. L. Atkin, W.-C. W. Li, Twists
of newforms and pseudo-eigenvalues of W-operators, Invent. Math. 48 (1978); [Li] W. Li,
Newforms and functional equations, Math. Ann. 212 (1975); [Mi] T. Miyake, Modular Forms;
[De] P. Deligne, La conjecture de Weil I; [Ap] T. Apostol, Introduction to Analytic Number
Theory.

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

from builder.characters import CharacterOrbit, character_orbit
from builder.checks import char_formulas as CF
from builder.checks import formulas as F
from builder.tables.numfield import NumberField
from builder.tables.source import Source

TRACE_FORMULA_MAX_N = 30

CHECKS = [
    ("units complete", "every unit stored as done"),
    ("dimensions", "dim_cusp, dim_new, dim_eis, dim_old, Sturm bound vs formulas; character data"),
    ("Σ dim = dim_new", "orbit dimensions add up to [Q(χ):Q]·dim_new"),
    ("orbit records", "orbit count and numbering, traces[0], field polynomial, rel_dim, AL primes"),
    ("trace formula", "Σ σ0(N/M)·Tr a_n, cond(χ) | M | N = Eichler–Selberg, n ≤ 30, (n, N) = 1"),
    ("Deligne (traces)", "|Tr a_n| ≤ dim·σ0(n)·n^((k−1)/2)"),
    ("Deligne (exact a_p)", "K_f totally real (χ = 1) or CM, |σ(a_p)| ≤ 2p^((k−1)/2) for all σ"),
    ("exact a_p vs traces", "Tr(a_p) of the stored a_p = stored Tr a_p"),
    ("multiplicativity", "Tr(a_m·a_n) = Tr a_mn, (m, n) = 1"),
    ("Hecke recursion", "a_{p^r} from a_p = stored Tr a_{p^r}; a_p² − a_{p²} = χ(p)p^(k−1)"),
    ("Atkin–Lehner", "a_p = −p^(k/2−1)ε_p (p ∥ N), a_p = 0 (p² | N), Fricke, root number; "
                     "χ ≠ 1: Li's a_p at p | N, AL pseudo-eigenvalues"),
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
    n, _, rest = head.partition("w")
    k, _, j = rest.partition("c")
    try:
        return (int(k), int(n), int(j or 0), int(orbit or 0))
    except ValueError:
        return (0, 0, 0, 0)


def space_label(N: int, k: int, j: int = 0) -> str:
    return f"{N}w{k}" + (f"c{j}" if j else "")


# ----------------------------------------------------------------------------- small helpers


def _kronecker(D: int, p: int) -> int:
    """(D/p) for a prime p (Kronecker symbol)."""
    if p == 2:
        if D % 2 == 0:
            return 0
        return 1 if D % 8 in (1, 7) else -1
    r = pow(D % p, (p - 1) // 2, p)
    return 0 if r == 0 else (1 if r == 1 else -1)


def _null(v) -> bool:
    """A SQL NULL as read by pandas (None, NaN, pd.NA); lists are never null."""
    if v is None:
        return True
    if isinstance(v, (list, tuple, str)) or hasattr(v, "__len__"):
        return False
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def _ramanujan(m: int, e: int) -> int:
    """c_m(e) = Tr_{Q(ζ_m)/Q}(ζ_m^e) = μ(m/g)·φ(m)/φ(m/g), g = gcd(e, m) ([Ap] §8.3)."""
    g = math.gcd(e, m)
    return F.moebius(m // g) * F.euler_phi(m) // F.euler_phi(m // g)


def _vp(n: int, p: int) -> int:
    v = 0
    while n % p == 0:
        n //= p
        v += 1
    return v


def _prim_exponent(chi: CharacterOrbit, p: int) -> int:
    """e with χ_prim(p) = ζ_m^e for the primitive character behind χ (p ∤ cond(χ)):
    χ_prim(p) = χ(y) for any y ≡ p (mod cond(χ)) prime to N."""
    y = p
    while math.gcd(y, chi.modulus) != 1:
        y += chi.conductor
    return chi.exponent(y)


def _chi(N: int, j: int) -> CharacterOrbit | None:
    """The character orbit j at level N (builder/characters), or None if there is none."""
    try:
        return character_orbit(N, j)
    except ValueError:
        return None


class _Orbit:
    """One stored orbit: its row, its field, its coefficients a_n (exact where known)."""

    def __init__(
        self, row, eigen: dict[int, list[str]], ap_bound: int, chi: CharacterOrbit | None
    ) -> None:
        self.row = row
        self.label = row.label
        self.N = int(row.level)
        self.k = int(row.weight)
        self.char_index = int(getattr(row, "char_index", 0) or 0)
        self.chi = chi  # None: an index builder/characters does not know (dimensions says so)
        self.dim = int(row.dim)
        deg = chi.degree if chi is not None else 1
        self.rel_dim = Fraction(self.dim, deg)  # [K_f : Q(χ)]; "orbit records" checks it
        self.traces = [int(t) for t in row.traces]
        self.eigen = eigen
        self.ap_bound = ap_bound
        self._K: NumberField | None = None
        self._a: dict[int, object] = {}
        self._u: dict[int, object] = {}
        self.bad_primes = {p for p, _ in F.factorize(self.N)} if self.N > 1 else set()

    @property
    def trivial(self) -> bool:
        return self.char_index == 0

    @property
    def nontrivial(self) -> bool:
        """A known nontrivial character (the χ-specific checks need it)."""
        return self.chi is not None and not self.chi.is_trivial

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

    def chi_value(self, p: int):
        """χ(p) ∈ K for p ∤ N: 1 for the trivial character; else a_p/ι(a_p) (ā_p = χ̄(p)a_p,
        [DS] Thm 5.5.3), or None when a_p is unknown or 0, or K has no complex conjugation."""
        if not self.nontrivial:
            return self.K.from_int(1)
        if p not in self._u:
            ap = self.ap_exact(p)
            u = None
            if ap is not None and not ap.is_zero() and self.K.conjugation() is not None:
                u = self.K.mul(ap, self.K.inverse(self.K.conj(ap)))
            self._u[p] = u
        return self._u[p]

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
                        u = self.chi_value(p)
                        if prev2 is None or u is None:
                            val = None
                        else:
                            val = K.mul(ap, prev) - K.mul(u, prev2) * (p ** (self.k - 1))
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

    def unit_of(r) -> tuple[int, int, int]:
        c = getattr(r, "char_index", 0)
        return (int(r.level), int(r.weight), 0 if _null(c) else int(c))

    res = results["units complete"]
    for r in spaces.itertuples():
        res.checked.add(space_label(*unit_of(r)))
    for r in failed.itertuples():
        lab = space_label(*unit_of(r))
        last = (r.error or "").strip().splitlines()[-1:] or ["no error text"]
        res.checked.add(lab)
        res.failures.append((lab, f"status failed: {last[0][:200]} (rerun `nfb run`)"))

    eigen_by_label: dict[str, dict[int, list[str]]] = defaultdict(dict)
    for r in eig.itertuples():
        eigen_by_label[r.label][int(r.p)] = list(r.coords)

    space_by_unit = {unit_of(r): r for r in spaces.itertuples()}
    forms_by_unit: dict[tuple[int, int, int], list] = defaultdict(list)
    for r in forms.itertuples():
        forms_by_unit[unit_of(r)].append(r)
    chis = {(N, j): _chi(N, j) for N, _, j in set(space_by_unit) | set(forms_by_unit)}

    orbits: dict[str, _Orbit] = {}
    for (N, k, j), rows in forms_by_unit.items():
        sp = space_by_unit.get((N, k, j))
        ap_bound = int(sp.ap_bound) if sp is not None else 0
        for r in rows:
            orbits[r.label] = _Orbit(r, eigen_by_label.get(r.label, {}), ap_bound, chis[(N, j)])

    for (N, k, j), sp in sorted(space_by_unit.items(), key=lambda x: (x[0][1], x[0][0], x[0][2])):
        rows = sorted(forms_by_unit.get((N, k, j), []), key=lambda r: int(r.orbit))
        chi = chis[(N, j)]
        _check_dimensions(results["dimensions"], sp, N, k, j, chi)
        _check_orbit_sum(
            results["Σ dim = dim_new"], results["orbit records"], sp, N, k, j, chi, rows
        )
    _check_trace_formula(results["trace formula"], space_by_unit, forms_by_unit, chis, max_n)

    for o in orbits.values():
        _check_deligne_traces(results["Deligne (traces)"], o)
        _check_exact_ap(results["exact a_p vs traces"], results["Deligne (exact a_p)"], o)
        _check_multiplicative(results["multiplicativity"], results["Hecke recursion"], o)
        _check_hecke_char(results["Hecke recursion"], o)
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


CHAR_COLUMNS = ("char_order", "char_conductor", "char_parity", "char_number", "char_degree")


def _check_dimensions(res: CheckResult, sp, N: int, k: int, j: int, chi) -> None:
    lab = space_label(N, k, j)
    res.checked.add(lab)
    if chi is None:
        res.failures.append((lab, f"char_index {j}: builder/characters has no such character "
                                  f"orbit at level {N}"))
        return
    if chi.is_trivial:
        expect = {
            "dim_cusp": F.dim_cusp(N, k),
            "dim_new": F.dim_new(N, k),
            "dim_eis": F.dim_eisenstein(N, k),
        }
    else:  # [CO] Thm 1, [CS] ch. 7; [Mt] for the new part
        expect = {
            "dim_cusp": CF.dim_cusp(N, k, chi),
            "dim_new": CF.dim_new(N, k, chi),
            "dim_eis": CF.dim_eisenstein(N, k, chi),
        }
    expect["sturm_bound"] = F.sturm_bound(N, k)
    expect["dim_old"] = expect["dim_cusp"] - expect["dim_new"]
    for name, want in expect.items():
        got = getattr(sp, name)
        if _null(got) or int(got) != want:
            res.failures.append((lab, f"{name} = {got}, formula gives {want}"))
    wants = (chi.order, chi.conductor, chi.parity, chi.number, chi.degree)
    for name, want in zip(CHAR_COLUMNS, wants, strict=True):
        if not hasattr(sp, name):  # a table written before characters: trivial only
            if j:
                res.failures.append((lab, f"{name} is not stored (character {j})"))
            continue
        got = getattr(sp, name)
        if _null(got) or int(got) != want:
            res.failures.append(
                (lab, f"{name} = {got}, builder/characters gives {want} for (N, j) = ({N}, {j})")
            )
    if chi.parity != (-1) ** k:  # S_k(N, χ) = M_k(N, χ) = 0: only the zero space may be stored
        stored = [getattr(sp, c) for c in ("dim_cusp", "dim_eis", "num_orbits")]
        if any(not _null(v) and int(v) != 0 for v in stored):
            res.failures.append(
                (lab, f"χ(−1) = {chi.parity:+d} ≠ (−1)^k: the space is 0, but dim_cusp, "
                      f"dim_eis, num_orbits = {stored}")
            )


def _check_orbit_sum(res_sum: CheckResult, res_rec: CheckResult, sp, N, k, j, chi, rows) -> None:
    lab = space_label(N, k, j)
    res_sum.checked.add(lab)
    deg = chi.degree if chi is not None else 1
    total = sum(int(r.dim) for r in rows)
    if total != deg * int(sp.dim_new):
        what = f"dim_new = {int(sp.dim_new)}" if deg == 1 else (
            f"[Q(χ):Q]·dim_new = {deg}·{int(sp.dim_new)} = {deg * int(sp.dim_new)}")
        res_sum.failures.append((lab, f"orbit dimensions add up to {total}, {what}"))
    res_rec.checked.add(lab)
    numbers = [int(r.orbit) for r in rows]
    expected_n = int(sp.num_orbits)
    if len(rows) != expected_n:
        missing = [f"{lab}-{i}" for i in range(1, expected_n + 1) if i not in numbers]
        what = f"; missing {', '.join(missing)}" if missing else ""
        res_rec.failures.append((lab, f"num_orbits = {expected_n} but {len(rows)} stored{what}"))
    elif numbers != list(range(1, len(rows) + 1)):
        missing = [f"{lab}-{i}" for i in range(1, max(numbers) + 1) if i not in numbers]
        res_rec.failures.append(
            (lab, f"orbits numbered {numbers}, not 1..{len(rows)}; missing {', '.join(missing)}")
        )
    primes_N = [p for p, _ in F.factorize(N)] if N > 1 else []
    cap = getattr(sp, "dim_cap", None)
    cap = 10**9 if _null(cap) else int(cap)
    for r in rows:
        olab = r.label
        res_rec.checked.add(olab)
        problems = []
        if olab != f"{lab}-{int(r.orbit)}":
            problems.append(f"label {olab!r} is not {lab}-{int(r.orbit)}")
        if not r.traces or int(r.traces[0]) != int(r.dim):
            problems.append(f"traces[0] = {r.traces[0] if r.traces else None} ≠ dim {r.dim}")
        poly = list(r.field_poly)
        if not poly and j != 0:  # split over Q(χ): the whole new part, F never lifted
            if len(rows) != 1 or int(r.dim) != deg * int(sp.dim_new) or bool(r.has_ap) or (
                    not _null(r.hecke_poly_2)):
                problems.append("empty field_poly (new part irreducible over Q(χ)) but not "
                                "the unit's only orbit of dim [Q(χ):Q]·dim_new without exact "
                                "a_p and hecke_poly_2")
        elif len(poly) - 1 != int(r.dim):
            problems.append(f"field_poly of degree {len(poly) - 1} ≠ dim {r.dim}")
        else:
            import flint

            if _null(r.field_disc):
                if int(r.dim) <= int(cap):
                    problems.append(f"field_disc missing for dim {r.dim} ≤ dim_cap {cap}")
            elif str(flint.fmpz_poly(poly).discriminant() if len(poly) > 2 else 1) != str(
                    r.field_disc) and int(r.dim) > 1:
                disc = int(flint.fmpz_poly(poly).discriminant())
                problems.append(f"field_disc {r.field_disc} ≠ disc(field_poly) = {disc}")
        if hasattr(r, "rel_dim"):
            rd = int(r.dim) if _null(r.rel_dim) else int(r.rel_dim)  # null: = dim
            if rd * deg != int(r.dim):
                problems.append(f"rel_dim {r.rel_dim}·[Q(χ):Q] = {rd}·{deg} ≠ dim {r.dim}")
        elif deg > 1:
            problems.append("rel_dim is not stored")
        if hasattr(r, "char_order") and chi is not None:
            if _null(r.char_order) or int(r.char_order) != chi.order:
                problems.append(f"char_order {r.char_order} ≠ the order {chi.order} of χ")
        if j == 0:
            if [int(p) for p in r.al_primes] != primes_N:
                problems.append(f"al_primes {list(r.al_primes)} ≠ primes of N {primes_N}")
            pseudo = getattr(r, "al_pseudo_values", None)
            if list(getattr(r, "al_pseudo_primes", None) or []) or not _null(pseudo):
                problems.append("al_pseudo_primes / al_pseudo_values must be empty / null "
                                "for the trivial character (its signs are al_signs)")
        else:  # W_Q does not act by ±1 on S_k(N, χ): nothing of the kind is stored
            if list(r.al_primes) or list(r.al_signs) or (r.al_pattern or ""):
                problems.append(
                    f"al_primes {list(r.al_primes)}, al_signs {list(r.al_signs)}, al_pattern "
                    f"{r.al_pattern!r} must be empty for a nontrivial character"
                )
            for name in ("fricke_sign", "root_number", "lvalue_zero", "l_ratio"):
                v = getattr(r, name)
                if not _null(v):
                    v = int(v) if isinstance(v, float) and v.is_integer() else v  # NaN columns
                    problems.append(f"{name} = {v} must be null for a nontrivial character")
        for pr in problems:
            res_rec.failures.append((olab, pr))


def _check_trace_formula(
    res: CheckResult, space_by_unit, forms_by_unit, chis, max_n: int
) -> None:
    stored_traces: dict[tuple[int, int, int], tuple[list[list[int]], int]] = {}
    for u, sp in space_by_unit.items():
        rows = forms_by_unit.get(u, [])
        tb = min([len(r.traces) for r in rows], default=int(sp.trace_bound))
        stored_traces[u] = ([list(r.traces) for r in rows], tb)
    for N, k, j in sorted(space_by_unit, key=lambda u: (u[1], u[0], u[2])):
        lab = space_label(N, k, j)
        chi = chis[(N, j)]
        if chi is None:
            res.not_checked.append((lab, f"no character orbit {j} at level {N}"))
            continue
        if chi.is_trivial:
            needed = {M: (M, k, 0) for M in F.divisors(N)}
            missing = [M for M, u in needed.items() if u not in space_by_unit]
            if missing:
                res.not_checked.append(
                    (
                        lab,
                        f"divisor levels {', '.join(map(str, missing))} of weight {k} "
                        "not in the table",
                    )
                )
                continue
        else:  # χ_M for cond(χ) | M | N: the unit (M, k, index of the orbit of χ_M)
            needed = {}
            for M in F.divisors(N):
                if M % chi.conductor == 0:
                    idx = j if M == N else CF.induced_character(chi, M)[0].index
                    needed[M] = (M, k, idx)
            missing = [space_label(*u) for u in needed.values() if u not in space_by_unit]
            if missing:
                res.not_checked.append(
                    (lab, f"units {', '.join(missing)} (χ_M, cond(χ) | M | N) not in the table")
                )
                continue
        bound = min(max_n, min(stored_traces[u][1] for u in needed.values()))
        ns = [n for n in range(1, bound + 1) if math.gcd(n, N) == 1]
        if not ns:
            res.not_checked.append((lab, "no n coprime to N within the stored traces"))
            continue
        res.checked.add(lab)
        bad = []
        for n in ns:
            total = 0
            for M, u in needed.items():
                mult = F.sigma0(N // M)
                total += mult * sum(int(t[n - 1]) for t in stored_traces[u][0])
            want = F.trace_hecke(N, k, n) if chi.is_trivial else CF.absolute_trace(N, k, chi, n)
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
    if o.trivial and not K.is_totally_real():
        res_del.failures.append(
            (o.label, f"field polynomial {o.row.field_poly} is not totally real")
        )
        return
    if not o.trivial and K.conjugation() is None:
        res_del.failures.append(
            (o.label, f"field polynomial {o.row.field_poly}: K_f is neither totally real nor CM")
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
        bound_sq = 4 * p ** (o.k - 1)
        ok = K.all_abs_le(a, bound_sq) if o.trivial else K.all_abs_sq_le(a, bound_sq)
        if not ok:
            res_del.failures.append(
                (o.label, f"a_{p} = {coords} has an embedding above 2·{p}^(({o.k}−1)/2)")
            )


def _exact_ok(o: _Orbit) -> bool:
    """Exact a_p are usable: stored with dim coordinates each (else other checks report)."""
    return all(len(c) == o.dim for c in o.eigen.values())


def _check_multiplicative(res_mul: CheckResult, res_hecke: CheckResult, o: _Orbit) -> None:
    if not o.eigen and o.dim != 1:
        res_mul.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
        res_hecke.not_checked.append((o.label, "no exact a_p stored (dim above dim_cap)"))
        return
    if not _exact_ok(o):
        return  # malformed coordinates are reported by "exact a_p vs traces"
    if o.chi is None:
        return  # an unknown character: reported by "dimensions"
    bad_mul, bad_hecke = [], []
    did_mul = did_hecke = False
    for n in range(4, len(o.traces) + 1):
        fac = F.factorize(n)
        if len(fac) == 1 and fac[0][1] == 1:
            continue
        x = o.a(n)
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


def _check_hecke_char(res: CheckResult, o: _Orbit) -> None:
    """χ ≠ 1, p ∤ N, p² ≤ trace_bound: a_p² − a_{p²} = χ(p)p^(k−1) ([DS] Prop 5.3.1), in
    traces Tr(a_p²) − Tr a_{p²} = p^(k−1)·rel_dim·c_m(e(p)); and u = a_p/ι(a_p) = χ(p)
    ([DS] Thm 5.5.3: ā_p = χ̄(p)a_p) is an m-th root of unity with Tr u = rel_dim·c_m(e(p))."""
    if not o.nontrivial or not (o.eigen or o.dim == 1) or not _exact_ok(o):
        return
    K, m = o.K, o.chi.order
    has_conj = K.conjugation() is not None
    bad = []
    did = False
    for p in F.primes_up_to(math.isqrt(len(o.traces))):
        if p in o.bad_primes:
            continue
        ap = o.ap_exact(p)
        if ap is None:
            continue
        did = True
        c = _ramanujan(m, o.chi.exponent(p))
        got = K.trace(K.mul(ap, ap)) - o.traces[p * p - 1]
        want = p ** (o.k - 1) * o.rel_dim * c
        if got != want:
            bad.append(f"p={p}: Tr(a_{p}²) − Tr a_{p * p} = {got}, "
                       f"χ({p})·{p}^{o.k - 1} gives {want}")
        if has_conj:
            u = o.chi_value(p)
            if u is not None:
                if K.power(u, m) != K.from_int(1):
                    bad.append(f"p={p}: a_{p}/ā_{p} is not a root of unity of order | {m}")
                elif K.trace(u) != o.rel_dim * c:
                    bad.append(f"p={p}: Tr(a_{p}/ā_{p}) = {K.trace(u)}, Tr χ({p}) = "
                               f"{o.rel_dim * c}")
    if did:
        res.checked.add(o.label)
    if bad:
        res.failures.append((o.label, "; ".join(bad[:4]) + (" …" if len(bad) > 4 else "")))


def _check_atkin_lehner(res: CheckResult, o: _Orbit) -> None:
    if not o.trivial:
        _check_bad_primes_char(res, o)
        _check_pseudo(res, o)
        return
    res.checked.add(o.label)
    r = o.row
    primes = [int(p) for p in r.al_primes]
    signs = [int(s) for s in r.al_signs]
    problems = []
    if len(primes) != len(signs) or any(s not in (1, -1) for s in signs):
        res.failures.append((o.label, f"al_signs {signs} do not match al_primes {primes}"))
        return
    if _null(r.fricke_sign) or _null(r.root_number):
        res.failures.append((o.label, "fricke_sign or root_number is null (trivial character)"))
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


def _check_bad_primes_char(res: CheckResult, o: _Orbit) -> None:
    """p | N for χ ≠ 1 ([Li] Thm 3, [Mi] Thm 4.6.17), p^r ∥ N, p^s ∥ cond(χ):
    s = r: |σ(a_p)|² = p^(k−1); r = 1, s = 0: a_p² = χ'(p)p^(k−2) (χ' = χ mod N/p);
    r ≥ 2, s < r: a_p = 0."""
    if not o.nontrivial:
        return
    res.checked.add(o.label)
    m, chi = o.chi.order, o.chi
    exact = bool(o.eigen or o.dim == 1) and _exact_ok(o)
    K = o.K if exact else None
    problems = []
    for p, r in F.factorize(o.N):
        s = _vp(chi.conductor, p)
        ap = o.ap_exact(p) if exact else None
        if s == r:
            if ap is not None and K.conjugation() is not None:
                n = K.abs_sq(ap)
                if n != K.from_int(p ** (o.k - 1)):
                    q = K.rational_value(n)
                    problems.append(f"a_{p}·ā_{p} = {'an irrational' if q is None else q}, "
                                    f"expected {p}^{o.k - 1} (p-part of N = p-part of cond χ)")
        elif r == 1:  # s = 0
            want = p ** (o.k - 2) * o.rel_dim * _ramanujan(m, _prim_exponent(chi, p))
            if p * p <= len(o.traces) and o.traces[p * p - 1] != want:
                problems.append(f"Tr a_{p * p} = {o.traces[p * p - 1]}, expected Tr χ'({p})·"
                                f"{p}^{o.k - 2} = {want} (a_{p * p} = a_{p}², p ∥ N, p ∤ cond χ)")
            if ap is not None:
                x = K.mul(ap, ap)
                if K.power(x, m) != K.from_int(p ** (m * (o.k - 2))):
                    problems.append(f"a_{p}²/{p}^{o.k - 2} is not a root of unity of order | {m}")
                elif K.trace(x) != want:
                    problems.append(f"Tr(a_{p}²) = {K.trace(x)}, expected Tr χ'({p})·"
                                    f"{p}^{o.k - 2} = {want}")
        else:  # r ≥ 2, s < r
            if p <= len(o.traces) and o.traces[p - 1] != 0:
                problems.append(f"Tr a_{p} = {o.traces[p - 1]}, expected 0 "
                                f"({p}² | N, {p}-part of cond χ smaller)")
            if ap is not None and not ap.is_zero():
                problems.append(f"a_{p} = {o.eigen.get(p)}, expected 0 "
                                f"({p}² | N, {p}-part of cond χ smaller)")
    for pr in problems:
        res.failures.append((o.label, pr))


def _check_pseudo(res: CheckResult, o: _Orbit) -> None:
    """χ ≠ 1: al_pseudo_primes = the p | N with p ∤ cond χ (orbits with exact a_p), and
    w = w_Q (Q = p^r ∥ N) = Q^(k/2−1)·λ_Q with |λ_Q| = 1, λ_Q² = χ̄'(Q) (χ' = χ mod N/Q)
    ([AL78] §1): (w²)^m = Q^(m(k−2)), Tr(w²) = Q^(k−2)·rel_dim·c_m(e'(Q)), w·ι(w) = Q^(k−2);
    for r = 1 also w·a_p = −p^(k−2) ([AL78] §2: λ_p = −p^(1−k/2)·ā_p)."""
    if not o.nontrivial:
        return
    r_ = o.row
    primes = [int(p) for p in getattr(r_, "al_pseudo_primes", None) or []]
    values = getattr(r_, "al_pseudo_values", None)
    values = None if values is None or _null(values) else list(values)
    has_ap = bool(r_.has_ap)
    want = [p for p, _ in F.factorize(o.N) if o.chi.conductor % p] if has_ap else []
    if primes != want or (values is None) == has_ap:
        res.failures.append((o.label, f"al_pseudo_primes {primes} (values "
                             f"{'null' if values is None else 'stored'}), expected {want} "
                             f"with values {'stored' if has_ap else 'null'}"))
        return
    if not primes:
        return
    res.checked.add(o.label)
    if len(values) != len(primes) or any(len(v) != o.dim for v in values):
        res.failures.append((o.label, "al_pseudo_values not aligned with al_pseudo_primes "
                             f"or not {o.dim} coordinates each"))
        return
    K, m = o.K, o.chi.order
    problems = []
    for p, coords in zip(primes, values, strict=True):
        r = _vp(o.N, p)
        Q, scale = p ** r, p ** (r * (o.k - 2))
        w = K.element(coords)
        w2 = K.mul(w, w)
        e = r * _prim_exponent(o.chi, p) % m
        if K.power(w2, m) != K.from_int(scale ** m):
            problems.append(f"w_{Q}²/{Q}^{o.k - 2} is not a root of unity of order | {m}")
        elif K.trace(w2) != scale * o.rel_dim * _ramanujan(m, e):
            problems.append(f"Tr(w_{Q}²) = {K.trace(w2)}, expected Tr χ̄'({Q})·{Q}^{o.k - 2}"
                            f" = {scale * o.rel_dim * _ramanujan(m, e)}")
        if K.conjugation() is not None and K.abs_sq(w) != K.from_int(scale):
            problems.append(f"w_{Q}·w̄_{Q} ≠ {Q}^{o.k - 2} (|λ_{Q}| = 1)")
        ap = o.ap_exact(p) if r == 1 else None
        if ap is not None and K.mul(w, ap) != K.from_int(-(p ** (o.k - 2))):
            problems.append(f"w_{p}·a_{p} ≠ {-(p ** (o.k - 2))} = −{p}^{o.k - 2} "
                            f"(λ_{p} = −{p}^(1−k/2)·ā_{p})")
    for pr in problems:
        res.failures.append((o.label, pr))


def _check_lvalue(res: CheckResult, o: _Orbit) -> None:
    if not o.trivial:
        return  # no root number for a nontrivial character ("orbit records": fields null)
    r = o.row
    lz = None if _null(r.lvalue_zero) else bool(r.lvalue_zero)
    if not _null(r.root_number) and int(r.root_number) == -1:
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
    if _null(r.cm_disc):
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
