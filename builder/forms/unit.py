"""Compute one unit (N, k, χ = trivial) into a SpaceRecord.

Steps: sign +1 symbols → cuspidal subspace → new subspace → Galois orbits →
for each orbit an eigen-functional (builder.forms.eigen) → exact a_p for
small orbits, traces of a_n for all, field polynomial, Atkin–Lehner and
Fricke signs, CM, L-value data.  Orbits are ordered by (dimension, traces of
a_p for p = 2, 3, 5, … as integers, then traces of a_n) and numbered from 1.
"""

from __future__ import annotations

import time
from math import gcd, isqrt

import flint
import numpy as np

from builder.arith import (
    check_level,
    check_weight,
    divisors,
    factor,
    is_prime,
    primes_up_to,
    sturm_bound,
)
from builder.forms.eigen import EigenForm, trace_primes
from builder.forms.fields import canonical_polynomial, change_basis_matrix
from builder.forms.newspace import NewSpace
from builder.forms.record import NewformRecord, Params, SpaceRecord, make_label
from builder.forms.winding import l_ratio
from builder.linalg import charpoly_int, restrict
from builder.symbols.cusps import point_cusp_classes
from builder.symbols.space import clear_caches, cuspidal_space

FIELD_BOUND = 50  # a_n for n ≤ 50·2^j span the order used for the field polynomial


def compute(N: int, k: int, params: Params, char_index: int = 0) -> SpaceRecord:
    """The record of S_k(Γ0(N)) (trivial character); pure and deterministic."""
    N, k = check_level(N), check_weight(k)
    params.validate()
    if char_index != 0:
        raise ValueError(f"char_index must be 0 (trivial character) for now, got {char_index}")
    t0 = time.perf_counter()
    try:
        return _compute(N, k, params, t0)
    finally:
        clear_caches()  # bounded memory across the units of a long run


def _compute(N: int, k: int, params: Params, t0: float) -> SpaceRecord:
    base = dict(level=N, weight=k, char_index=0, params=_params_dict(params))
    if k % 2:
        return SpaceRecord(
            dim_cusp=0, dim_new=0, dim_old=0, dim_eis=0, num_orbits=0,
            sturm_bound=sturm_bound(N, k), **base,
        )
    S = cuspidal_space(N, k, 1)
    ncusp = len(point_cusp_classes(S.P1)[1])
    dim_eis = ncusp - 1 if k == 2 else ncusp
    V = NewSpace(S)
    eigs = [EigenForm(V, o) for o in V.orbits()]
    traces = all_traces(eigs, params.trace_bound)
    forms = [_orbit_data(E, t, params) for E, t in zip(eigs, traces, strict=False)]
    forms.sort(key=lambda f: f["_key"])
    records = []
    for i, f in enumerate(forms, start=1):
        f.pop("_key")
        records.append(NewformRecord(label=make_label(N, k, i), orbit=i, **f))
    return SpaceRecord(
        dim_cusp=S.dim_cuspidal,
        dim_new=V.dim,
        dim_old=S.dim_cuspidal - V.dim,
        dim_eis=dim_eis,
        num_orbits=len(records),
        sturm_bound=sturm_bound(N, k),
        newforms=records,
        seconds=round(time.perf_counter() - t0, 4),
        **base,
    )


def _params_dict(p: Params) -> dict:
    return {"trace_bound": p.trace_bound, "ap_bound": p.ap_bound, "dim_cap": p.dim_cap}


# -- one orbit ------------------------------------------------------------------


def _orbit_data(E: EigenForm, traces: list[int], params: Params) -> dict:
    V, orbit = E.new, E.orbit
    N, k, d = V.N, V.k, orbit.dim
    B = params.trace_bound
    exact = d <= params.dim_cap
    if exact:
        poly, beta, ap = _exact_field_data(E, params.ap_bound)
    else:
        poly, ap = orbit.poly, None
    signs = {p: orbit.signs[p] for p, _ in factor(N)}
    fricke = 1
    for s in signs.values():
        fricke *= s
    root = (-1) ** (k // 2) * fricke
    cm = cm_discriminant(E)
    lzero, ratio = _lvalue(E, root)
    first_good = next(p for p in primes_up_to(max(2 * N + 10, 100)) if N % p)
    hp = orbit.poly if orbit.prime == first_good else charpoly_int(
        restrict(orbit.basis, V.hecke(first_good))
    )
    ptraces = [traces[p - 1] for p in primes_up_to(B)]
    return {
        "dim": d,
        "field_poly": [int(c) for c in poly.coeffs()],
        "field_disc": str(int(poly.discriminant())) if d > 1 else "1",
        "traces": traces,
        "atkin_lehner": signs,
        "fricke_sign": fricke,
        "root_number": root,
        "is_cm": cm is not None,
        "cm_disc": cm,
        "lvalue_zero": lzero,
        "l_ratio": ratio,
        "ap": ap,
        "hecke_poly_2": [int(c) for c in hp.coeffs()],
        "_key": (d, ptraces, traces),
    }


def _exact_field_data(E: EigenForm, ap_bound: int):
    """Canonical polynomial, its root β, and exact a_p (p ≤ ap_bound) in β's power basis."""
    K = E.K
    bound = FIELD_BOUND
    ap_cache: dict[int, object] = {}

    def ap(p):
        if p not in ap_cache:
            ap_cache[p] = E.ap(p)
        return ap_cache[p]

    while True:
        an = exact_an(E, bound, ap)
        try:
            poly, beta = canonical_polynomial(K, an[1:])
            break
        except ArithmeticError:
            if bound > 4 * sturm_bound(E.N, E.k) + 100:
                raise
            bound *= 2
    P = change_basis_matrix(K, beta)
    out = {}
    for p in primes_up_to(ap_bound):
        c = K.coords(ap(p))
        row = flint.fmpq_mat(1, K.d, c) * P
        out[p] = [str(row[0, j]) for j in range(K.d)]
    return poly, beta, out


def exact_an(E: EigenForm, B: int, ap) -> list:
    """Exact a_n ∈ K for 0 ≤ n ≤ B (index 0 unused) by multiplicativity and recursion."""
    K = E.K
    a = [None] * (B + 1)
    a[1] = K.elt([1])
    pk1 = None
    for p in primes_up_to(B):
        pk1 = p ** (E.k - 1)
        bad = E.N % p == 0
        prev2, prev = K.elt([1]), ap(p)
        q = p
        powers = {p: prev}
        while q * p <= B:
            nxt = K.mul(ap(p), prev) - (0 if bad else prev2 * pk1)
            prev2, prev = prev, nxt
            q *= p
            powers[q] = nxt
        for qq, val in powers.items():
            a[qq] = val
    for n in range(2, B + 1):
        if a[n] is None:
            f = factor(n)
            val = K.elt([1])
            for p, e in f:
                val = K.mul(val, a[p**e])
            a[n] = val
    return a


# -- traces -----------------------------------------------------------------------


def deligne_trace_bound(d: int, k: int, B: int) -> int:
    """An integer ≥ max_{n ≤ B} d·σ0(n)·n^((k−1)/2) (Deligne's bound on |Tr a_n|)."""
    s0 = max(len(divisors(n)) for n in range(1, B + 1))
    root = isqrt(B**(k - 1)) + 1
    return d * s0 * root


def hecke_traces(E: EigenForm, B: int) -> list[int]:
    """[Tr_{K/Q} a_n for n = 1..B] for one orbit (see all_traces)."""
    return all_traces([E], B)[0]


def all_traces(eigs: list[EigenForm], B: int) -> list[list[int]]:
    """Exact [Tr a_n, n = 1..B] for every orbit, sharing the Heilbronn sums.

    Rational orbits use exact integers.  Others work in F_ℓ[x]/(f) for primes
    ℓ < 2^31 whose product exceeds twice Deligne's bound d·σ0(n)·n^((k−1)/2),
    then lift by CRT to the symmetric residue: exact, since |Tr a_n| is
    below the bound (Deligne's theorem).
    """
    out: list = [None] * len(eigs)
    for i, E in enumerate(eigs):
        if E.d == 1:
            out[i] = _rational_traces(E, B)
    todo = [i for i in range(len(eigs)) if out[i] is None]
    if not todo:
        return out
    need = {i: 2 * deligne_trace_bound(eigs[i].d, eigs[i].k, B) for i in todo}
    residues: dict[int, list] = {i: [] for i in todo}
    moduli: dict[int, list] = {i: [] for i in todo}
    for ell in trace_primes(max(need.values()) * 2**40):
        active = [i for i in todo if _prod(moduli[i]) <= need[i]]
        if not active:
            break
        ok = []
        for i in active:
            try:
                eigs[i]._x0_inv_mod(ell)
                ok.append(i)
            except ZeroDivisionError:
                continue
        for i, tr in zip(ok, _traces_mod_many([eigs[i] for i in ok], B, ell), strict=False):
            residues[i].append(tr)
            moduli[i].append(ell)
    for i in todo:
        M = _prod(moduli[i])
        if M <= need[i]:
            raise ArithmeticError("not enough good primes for the trace lift")
        vals = []
        for n in range(B):
            x = _crt([r[n] for r in residues[i]], moduli[i])
            vals.append(x - M if x > M // 2 else x)
        out[i] = vals
    return out


def _prod(xs: list[int]) -> int:
    p = 1
    for x in xs:
        p *= x
    return p


def _rational_traces(E: EigenForm, B: int) -> list[int]:
    """a_n ∈ Z for n ≤ B of a rational orbit, exactly."""
    den = int(E._phi[E.x0][0])
    a = [0] * (B + 1)
    a[1] = 1
    for p in primes_up_to(B):
        s = int(E._heilbronn_sum(p, E._phi)[0])
        if s % den:
            raise ArithmeticError(f"a_{p} is not an integer for a rational orbit")
        a[p] = s // den
    _fill_multiplicative(a, B, E.N, E.k, lambda x, y: x * y, 1)
    return a[1:]


def _fill_multiplicative(a: list, B: int, N: int, k: int, mul, one) -> None:
    """Fill a[n] from a[p]: Hecke recursion at prime powers, then multiplicativity."""
    for p in primes_up_to(B):
        pk1 = p ** (k - 1)
        bad = N % p == 0
        prev2, prev, q = one, a[p], p
        while q * p <= B:
            nxt = mul(a[p], prev) if bad else mul(a[p], prev) - pk1 * prev2
            prev2, prev = prev, nxt
            q *= p
            a[q] = nxt
    for n in range(2, B + 1):
        f = factor(n)
        if len(f) > 1:
            val = one
            for p, e in f:
                val = mul(val, a[p**e])
            a[n] = val


def _traces_mod_many(eigs: list[EigenForm], B: int, ell: int) -> list[list[int]]:
    """Traces mod ℓ for several orbits; one Heilbronn sum per (x0, p)."""
    groups: dict[int, list[int]] = {}
    for i, E in enumerate(eigs):
        groups.setdefault(E.x0, []).append(i)
    aps: list[dict] = [dict() for _ in eigs]
    for _x0, members in groups.items():
        tables = [eigs[i]._mod_table(ell) for i in members]
        stacked = np.concatenate(tables, axis=1) if len(tables) > 1 else tables[0]
        lead = eigs[members[0]]
        offs = np.cumsum([0] + [eigs[i].d for i in members])
        for p in primes_up_to(B):
            tot = lead._heilbronn_sum(p, stacked, ell)
            for t, i in enumerate(members):
                E = eigs[i]
                v = flint.nmod_poly([int(x) for x in tot[offs[t] : offs[t + 1]]], ell)
                aps[i][p] = (v * E._x0_inv_mod(ell)) % E._f_mod(ell)
    out = []
    for i, E in enumerate(eigs):
        f = E._f_mod(ell)
        one = flint.nmod_poly([1], ell)
        a: list = [None] * (B + 1)
        a[1] = one
        for p, v in aps[i].items():
            a[p] = v

        def mul(x, y, f=f):
            return (x * y) % f

        _fill_multiplicative(a, B, E.N, E.k, mul, one)
        ps = _power_sums_mod(E.orbit.poly, E.d, ell)
        tr = []
        for n in range(1, B + 1):
            c = [int(x) for x in a[n].coeffs()]
            tr.append(sum(ci * ps[j] for j, ci in enumerate(c)) % ell)
        out.append(tr)
    return out


def _crt(res: list[int], mods: list[int]) -> int:
    x, m = 0, 1
    for r, q in zip(res, mods, strict=False):
        t = ((r - x) * pow(m, -1, q)) % q
        x += m * t
        m *= q
    return x


def _power_sums_mod(f: flint.fmpz_poly, d: int, ell: int) -> list[int]:
    from builder.forms.fields import _power_sums

    return [x % ell for x in _power_sums(f, d)]


# -- CM -------------------------------------------------------------------------------


def kronecker(D: int, n: int) -> int:
    """Kronecker symbol (D/n) for n ≥ 1 (common practice)."""
    if n == 1:
        return 1
    res = 1
    for p, e in factor(n):
        if p == 2:
            if D % 2 == 0:
                return 0
            s = 1 if D % 8 in (1, 7) else -1
        else:
            r = D % p
            if r == 0:
                return 0
            s = 1 if pow(r, (p - 1) // 2, p) == 1 else -1
        res *= s**e
    return res


def _fundamental_discriminants_dividing(N: int) -> list[int]:
    out = []
    for m in divisors(N):
        D = -m
        if D % 4 == 1 and _squarefree(m):
            out.append(D)
        elif D % 4 == 0 and (-D // 4) % 4 in (1, 2) and _squarefree(m // 4):
            out.append(D)
    return sorted(out, key=lambda x: -x)


def _squarefree(m: int) -> bool:
    return all(e == 1 for _, e in factor(m))


def cm_discriminant(E: EigenForm) -> int | None:
    """The CM discriminant D < 0 of the orbit, or None; proved by a Sturm-bound check.

    f has CM by D iff a_p = 0 for every prime p with (D/p) = −1.  The series
    Σ_{(n,D)=1} (1 − (D/n)) a_n q^n is a form on Γ0(lcm(N, D²)) ([Shimura],
    twists), so by Sturm's theorem [Su] it vanishes once a_p = 0 for all such
    p up to the Sturm bound of that level.  a_p = 0 is decided exactly by
    Tr(a_p²) = 0 (K totally real), computed modulo primes above its Deligne bound.
    """
    for D in _fundamental_discriminants_dividing(E.N):
        L = E.N * D * D // gcd(E.N, D * D)
        bound = sturm_bound(L, E.k)
        ok = True
        for p in primes_up_to(bound):
            if kronecker(D, p) != -1:
                continue
            if not _ap_is_zero(E, p):
                ok = False
                break
        if ok:
            return D
    return None


def _ap_is_zero(E: EigenForm, p: int) -> bool:
    bound = E.d * 4 * p ** (E.k - 1)
    prod = 1
    for ell in trace_primes(4 * bound):
        try:
            ap = E.ap_mod(p, ell)
        except ZeroDivisionError:
            continue
        if not ap.is_zero():
            return False
        prod *= ell
        if prod > 2 * bound:
            return True
    return True


# -- L-values ---------------------------------------------------------------------------


def _lvalue(E: EigenForm, root: int) -> tuple[bool | None, str | None]:
    """Whether the critical value seen by the winding element vanishes, and L(f,1)/Ω⁺.

    Weight 2: L(f, 1) = 0 iff φ({0, ∞}) = 0 ([Cr] §2.8, Manin–Drinfeld).
    Weight k ≡ 2 (mod 4): the central value L(f, k/2) via X^(w/2)Y^(w/2){0, ∞},
    which lies in the +1 part.  Weight k ≡ 0 (mod 4): that symbol is odd, so
    the +1 functional cannot see it; we record True when the root number is −1
    (the functional equation forces the zero) and None otherwise.
    """
    S = E.space
    w = S.w
    if (w // 2) % 2 == 1:
        return (True if root == -1 else None), None
    j0 = S.P1.index_one(0, 1)
    x = (w // 2) * S.psi + j0
    zero = all(v == 0 for v in E._phi[x])
    ratio = l_ratio(E) if (E.d == 1 and E.k == 2) else None
    return zero, ratio


__all__ = [
    "compute", "hecke_traces", "all_traces", "exact_an", "cm_discriminant", "kronecker", "is_prime",
]
