"""Newform orbits with a Dirichlet character (builder/forms/charforms.py, builder/forms/unit.py).

Every oracle is independent of the engine (tests/char_oracles.py imports nothing from
``builder``):
[CO]  Cohen–Oesterlé dimension formula (tests/char_oracles.py: dim_cusp_char, dim_new_char).
[CS]  H. Cohen, F. Strömberg, Modular Forms: A Classical Approach, Thm 12.4.11 — the
      Eichler–Selberg trace formula with character (tests/char_oracles.py: trace_hecke_char).
[Li]  W. Li, Newforms and functional equations, Math. Ann. 212 (1975): S_k(N, χ) =
      ⊕_{cond χ | M | N} ⊕_{d | N/M} S_k^new(M, χ_M)(dz), so Tr T_n = Σ_M σ0(N/M)·Tr^new_M.
[Mi]  T. Miyake, Modular Forms, Springer 1989, Thm 4.6.17 (a_p for p | N with character).
[YM]  Y. Martin, Multiplicative η-quotients, Trans. AMS 348 (1996), Table I (from memory,
      validated in tests/test_char_oracles.py).
[De]  P. Deligne, La conjecture de Weil I (1974): |σ(a_p)| ≤ 2p^((k−1)/2) for p ∤ N.
[DS]  F. Diamond, J. Shurman, A First Course in Modular Forms, Prop. 5.8.5: a_{p²} =
      a_p² − χ(p)p^(k−1).
"""

from __future__ import annotations

import math
from functools import cache
from math import gcd

import flint
import pytest

from builder.arith import factor, primes_up_to
from builder.characters import character_orbits, primes_one_mod
from builder.forms.charforms import CharUnit
from builder.forms.record import Params, compute_unit
from tests.char_oracles import (
    character_at_level,
    dim_cusp_char,
    dim_new_char,
    eta_char_forms,
    ramanujan_sum,
    trace_hecke_char,
)

NMAX = 20


def _matching(k: int, chi) -> bool:
    return (k % 2 == 0) == (chi.parity == 1)


@pytest.mark.parametrize("N", range(1, 61))
def test_cusp_and_new_dimensions_for_every_character_orbit(N):
    """The +1 cuspidal symbols mod ℓ (kernel of the boundary map) and their new part
    (kernel of the degeneracy maps) have the [CO] dimensions, the new one by Möbius-type
    inversion over the levels divisible by the conductor ([Li]); N ≤ 60, 2 ≤ k ≤ 6."""
    for chi in character_orbits(N):
        oracle = (N, chi.order, chi.exps)
        for k in range(2, 7):
            if not _matching(k, chi):
                continue
            st = CharUnit(N, k, chi).conj(next(primes_one_mod(chi.order)), 1)
            assert st.dim_s == dim_cusp_char(oracle, k), (N, k, chi.index)
            if st.dim_s:
                assert st.V.shape[0] == dim_new_char(oracle, k), (N, k, chi.index)


@cache
def _new_traces(M: int, k: int, index: int) -> tuple[int, ...]:
    """Σ over the orbits of the unit (M, k, index) of Tr_{K/Q} a_n, n = 1..NMAX."""
    U = CharUnit(M, k, character_orbits(M)[index])
    tot = [0] * NMAX
    for o in U.orbits:
        tot = [a + b for a, b in zip(tot, U.traces(o, NMAX), strict=True)]
    return tuple(tot)


def _orbit_index(M: int, m: int, e: tuple[int, ...]) -> int:
    """Our index at level M of the orbit containing the oracle character (M, m, e)."""
    for O in character_orbits(M):
        L = m * O.order
        for a in range(1, L):
            if gcd(a, L) == 1 and all(
                O.exps[n] < 0 or (a * e[n] * (L // m) - O.exps[n] * (L // O.order)) % L == 0
                for n in range(M)
            ):
                return O.index
    raise AssertionError(f"no orbit at level {M} contains the character")


@pytest.mark.parametrize("N", range(3, 41))
def test_trace_formula_with_character(N):
    """Σ_{cond χ | M | N} σ0(N/M)·Σ_{orbits at (M, χ_M)} Tr a_n = Tr_{Q(χ)/Q} Tr(T_n |
    S_k(N, χ)) by the trace formula [CS] Thm 12.4.11, for n ≤ 20 coprime to N, k ∈ {2,3,4},
    every nontrivial character orbit ([Li] for the old part)."""
    for chi in character_orbits(N):
        if chi.order == 1:
            continue
        for k in (2, 3, 4):
            if not _matching(k, chi):
                continue
            lhs = [0] * NMAX
            for M in range(chi.conductor, N + 1):
                if N % M or M % chi.conductor:
                    continue
                _, m2, e2 = character_at_level((N, chi.order, chi.exps), M)
                s0 = sum(1 for d in range(1, N // M + 1) if (N // M) % d == 0)
                new = _new_traces(M, k, _orbit_index(M, m2, e2))
                lhs = [a + s0 * b for a, b in zip(lhs, new, strict=True)]
            for n in range(1, NMAX + 1):
                if gcd(n, N) == 1:
                    rhs = trace_hecke_char(n, (N, chi.order, chi.exps), k).trace()
                    assert lhs[n - 1] == rhs, (N, k, chi.index, n)


PARAMS = Params(trace_bound=200, ap_bound=50, dim_cap=20)


def _index_of(N: int, e: tuple[int, ...]) -> int:
    return _orbit_index(N, 2, e)


@pytest.mark.parametrize("form", eta_char_forms(200), ids=lambda f: f.name)
def test_eta_quotients_with_character(form):
    """[YM] Table I: the η-quotient is a newform in S_k(N, (D/·)); the unit of that
    character has a rational orbit whose a_n (n ≤ 200, = traces) are its coefficients."""
    N, k = form.level, form.weight
    R = compute_unit(N, k, PARAMS, char_index=_index_of(N, form.chi[2]))
    hits = [f for f in R.newforms if f.dim == 1 and tuple(f.traces) == form.coeffs]
    assert len(hits) == 1, form.name
    assert hits[0].ap is not None and hits[0].ap[2] == [str(form.coeffs[1])]


# a spread of units: odd and even weights, orders 2..12, conductors < N, several orbits
UNITS = [(7, 3, 1), (13, 2, 4), (16, 3, 4), (21, 2, 7), (25, 2, 4), (27, 2, 4), (45, 2, 4),
         (45, 2, 10), (11, 3, 3), (20, 3, 3), (28, 2, 6), (35, 2, 11), (9, 4, 2), (12, 3, 2),
         (45, 2, 2), (20, 3, 4), (36, 3, 2)]


@cache
def _record(N: int, k: int, j: int):
    return compute_unit(N, k, PARAMS, char_index=j)


def _embeddings(poly: list[int]) -> list:
    flint.ctx.prec = 200
    return [r for r, _ in flint.fmpz_poly(poly).complex_roots()]


def _value(coords: list[str], root) -> flint.acb:
    v = flint.acb(0)
    for c in reversed(coords):
        v = v * root + flint.acb(flint.fmpq(*[int(x) for x in (c.split("/") + ["1"])[:2]]))
    return v


@pytest.mark.parametrize("N,k,j", UNITS)
def test_record_invariants(N, k, j):
    """Σ orbit dims = φ(m)·dim_new ([Li]: each orbit meets each S_k(N, χ^a) in rel_dim
    forms); dims against [CO]; a_1 = 1; labels; K is CM or totally real (common practice:
    a_p̄ = χ̄(p)a_p)."""
    chi = character_orbits(N)[j]
    R = _record(N, k, j)
    oracle = (N, chi.order, chi.exps)
    assert (R.dim_cusp, R.dim_new) == (dim_cusp_char(oracle, k), dim_new_char(oracle, k))
    assert (R.char_order, R.char_conductor, R.char_parity, R.char_number) == (
        chi.order, chi.conductor, chi.parity, chi.number)
    assert sum(f.dim for f in R.newforms) == R.char_degree * R.dim_new
    for i, f in enumerate(R.newforms, start=1):
        assert f.label == f"{N}w{k}c{j}-{i}" and f.orbit == i
        assert f.rel_dim * R.char_degree == f.dim
        assert f.traces[0] == f.dim and len(f.field_poly) == f.dim + 1
        assert f.fricke_sign is None and f.atkin_lehner == {}
        real = sum(1 for r in _embeddings(f.field_poly) if r.imag.contains(0))
        assert real in (0, f.dim)


@pytest.mark.parametrize("N,k,j", UNITS)
def test_deligne_and_the_rules_at_bad_primes(N, k, j):
    """Every complex embedding σ of K: |σ(a_p)| ≤ 2p^((k−1)/2) for p ∤ N [De]; for p | N
    [Mi] Thm 4.6.17: |a_p| = p^((k−1)/2) if the p-parts of N and cond χ agree; a_p² has
    absolute value p^(k−2) if p ∥ N and p ∤ cond χ; a_p = 0 if p² | N and the p-part of
    cond χ is smaller than that of N."""
    chi = character_orbits(N)[j]
    R = _record(N, k, j)
    for f in R.newforms:
        roots = _embeddings(f.field_poly)
        for p, coords in f.ap.items():
            vals = [abs(_value(coords, r)) for r in roots]
            eN, ec = _pval(N, p), _pval(chi.conductor, p)
            if eN == 0:
                assert all(v < 2 * p ** ((k - 1) / 2) + 1e-9 for v in vals), (f.label, p)
            elif eN == ec:
                assert all(abs(v - p ** ((k - 1) / 2)) < 1e-9 for v in vals), (f.label, p)
            elif eN == 1:
                assert all(abs(v - p ** ((k - 2) / 2)) < 1e-9 for v in vals), (f.label, p)
            else:
                assert all(c == "0" for c in coords), (f.label, p)


def _pval(n: int, p: int) -> int:
    return dict(factor(n)).get(p, 0) if n > 1 else 0


@pytest.mark.parametrize("N,k,j", UNITS)
def test_hecke_relation_with_character_on_traces(N, k, j):
    """[DS] Prop. 5.8.5: a_{p²} = a_p² − χ(p)p^(k−1), so Tr_{K/Q}(a_p²) − Tr a_{p²} =
    p^(k−1)·rel_dim·c_m(e(p)), c_m the Ramanujan sum = Tr_{Q(ζ_m)/Q}(ζ_m^e) (Apostol,
    Introduction to Analytic Number Theory, §8.3); a_p exact, a_{p²} from the traces."""
    chi = character_orbits(N)[j]
    R = _record(N, k, j)
    for f in R.newforms:
        roots = _embeddings(f.field_poly)
        for p in primes_up_to(14):
            if N % p == 0:
                continue
            sq = sum((_value(f.ap[p], r) ** 2 for r in roots), flint.acb(0)).real
            want = f.traces[p * p - 1] + p ** (k - 1) * f.rel_dim * ramanujan_sum(
                chi.order, chi.exponent(p))
            assert abs(sq - want) < 1e-6, (f.label, p)


def test_cm_orbits_vanish_at_inert_primes():
    """A form with CM by Q(√D) has a_p = 0 for (D/p) = −1 (Ribet, Galois representations
    attached to eigenforms with Nebentypus, §3); η(z)³η(7z)³ has CM by Q(√−7) ([YM] Table I,
    from memory; checked here on the stored traces)."""
    R = _record(7, 3, 1)
    (f,) = R.newforms
    assert f.is_cm and f.cm_disc == -7
    for p in primes_up_to(200):
        if p not in (2, 7) and pow(-7 % p, (p - 1) // 2, p) == p - 1:  # Euler
            assert f.traces[p - 1] == 0


@pytest.mark.parametrize("N,k,j", [(7, 3, 1), (13, 2, 4), (25, 2, 3)])
def test_ap_is_zero_agrees_with_the_exact_ap(N, k, j):
    """The zero test of a_p (p ∤ N: Tr(χ̄(p)a_p²) = Σ|σ(a_p)|², an integer that vanishes iff
    a_p does — common practice, from ā_p = χ̄(p)a_p) against the exact a_p ∈ K of
    exact_aps, at every prime up to 60, zeros and non-zeros alike."""
    U = CharUnit(N, k, character_orbits(N)[j])
    ps = [p for p in primes_up_to(60)]
    for o in U.orbits:
        exact = U.exact_aps(o, ps)
        for p in ps:
            assert U.ap_is_zero(o, p) == (exact[p] == 0), (N, k, j, p)


def _unit_class(N: int, Q: int) -> int:
    """n ≡ Q (mod N/Q), n ≡ 1 (mod Q): χ(n) = χ_{N/Q}(Q) when χ is trivial modulo Q."""
    R = N // Q
    return next(n for n in range(1, N * Q + 1) if n % R == Q % R and n % Q == 1 % Q)


@pytest.mark.parametrize("N,k,j", UNITS)
def test_atkin_lehner_pseudo_eigenvalues(N, k, j):
    """[AL78] A. O. L. Atkin, W.-C. W. Li, Invent. Math. 48 (1978), §1–2 (statements from
    memory): at Q = p^r ∥ N with p ∤ cond χ, f|_k W_Q = λ_Q·f with |λ_Q| = 1 and λ_Q² =
    χ̄_{N/Q}(Q), and λ_p = −p^(1−k/2)·ā_p when r = 1.  The record stores w_Q =
    Q^(k/2−1)·λ_Q ∈ K; checked here in every complex embedding (the trace of w_Q² through
    the Ramanujan sum c_m, Apostol §8.3)."""
    chi = character_orbits(N)[j]
    R = _record(N, k, j)
    want = [p for p, _ in factor(N) if chi.conductor % p]
    for f in R.newforms:
        assert sorted(f.al_pseudo) == want, f.label
        roots = _embeddings(f.field_poly)
        for p, coords in f.al_pseudo.items():
            Q = p ** _pval(N, p)
            ws = [_value(coords, r) for r in roots]
            assert all(abs(abs(w) - Q ** ((k - 2) / 2)) < 1e-9 for w in ws), (f.label, p)
            e = chi.exponent(_unit_class(N, Q))
            tr = sum((w * w for w in ws), flint.acb(0))
            target = Q ** (k - 2) * f.rel_dim * ramanujan_sum(chi.order, e)
            assert abs(tr - target) < 1e-6, (f.label, p)
            if Q == p:
                for w, r in zip(ws, roots, strict=True):
                    assert abs(w * _value(f.ap[p], r) + p ** (k - 2)) < 1e-9, (f.label, p)


def test_the_units_above_reach_every_kind_of_pseudo_eigenvalue():
    """The parametrised checks above meet p ∥ N and p² | N, even and odd weight."""
    kinds = set()
    for N, k, j in UNITS:
        chi = character_orbits(N)[j]
        for p, e in factor(N):
            if chi.conductor % p and _record(N, k, j).newforms:
                kinds.add((min(e, 2), k % 2))
    assert kinds == {(1, 0), (1, 1), (2, 0), (2, 1)}


@pytest.mark.parametrize("N,k", [(27, 2), (49, 2), (32, 2), (50, 2), (75, 2), (18, 4),
                                 (32, 4)])
def test_pseudo_eigenvalues_for_the_trivial_character_are_the_signs(N, k):
    """With χ = 1 the same W_Q code gives w_Q = Q^(k/2−1)·ε_Q: the signs of the trivial-
    character engine (builder.forms.unit, another code path: [AL] matrices on rational
    symbols).  External anchors (from memory, Cremona's tables: the elliptic curves of
    conductor 27, 32, 49 have rank 0, so root number +1 and ε_N = −1)."""
    U = CharUnit(N, k, character_orbits(N)[0])
    Qs = {p: p**e for p, e in factor(N)}
    mine = []
    for o in U.orbits:
        w = U.exact_atkin_lehner(o, list(Qs.values()))
        signs = {}
        for p, Q in Qs.items():
            scale = Q ** ((k - 2) // 2)
            assert w[Q] in (scale, -scale), (N, k, Q)  # rational: ±Q^(k/2−1)
            signs[p] = 1 if w[Q] == scale else -1
        mine.append((o.dim, sorted(signs.items())))
    ref = [(f.dim, sorted(f.atkin_lehner.items())) for f in compute_unit(N, k).newforms]
    assert sorted(mine) == sorted(ref)
    if (N, k) in ((27, 2), (32, 2), (49, 2)):
        assert mine == [(1, [(dict(factor(N)).popitem()[0], -1)])]


def test_units_beyond_the_absolute_method_split_over_q_chi():
    """S_2(443, χ), χ of order 221: the absolute charpoly of T = T_2 + ⟨g⟩ has degree
    φ(221)·dim_new = 192·36 ([CO] for dim_new) and roots bounded by 2√2 + 1 (Deligne), so
    its integer lift needs 2(1 + ρ)^6912 > Π ℓ over the primes ℓ ≡ 1 (mod 221) below 2^21
    (listed here with sympy): the absolute method refuses it at once, and the splitting
    over Q(χ) finds the new part irreducible (one orbit of degree 6912)."""
    import sympy

    chi = character_orbits(443)[6]
    assert chi.order == 221 and dim_new_char((443, 221, chi.exps), 2) == 36
    prod = 1
    for ell in range(222, 1 << 21, 221):
        if sympy.isprime(ell):
            prod *= ell
    assert 1 + 192 * 36 * math.log2(1 + 2 * math.sqrt(2) + 1) > math.log2(prod)
    U = CharUnit(443, 2, chi)
    with pytest.raises(ArithmeticError, match=r"absolute degree φ\(221\)·36 = 6912"):
        U.check_liftable()
    assert not U._states  # refused before any conjugate space was built
    _, orbits = U.split
    assert [(o.relative, o.dim) for o in orbits] == [(True, 6912)]


@pytest.mark.parametrize("N,k,j", [(25, 2, 4), (23, 3, 3), (29, 3, 5), (27, 3, 5), (27, 4, 4)])
def test_relative_split_agrees_with_the_absolute_one(N, k, j, monkeypatch):
    """Units whose new part is one orbit: forced through the splitting over Q(χ)
    (irreducible modulo a degree-one prime 𝔩 ⇒ irreducible over Q(χ), Gauss's lemma; at
    27w3c5 and 29w3c5 no conjugate of the first ℓ keeps it irreducible and the subset sums
    of the degree patterns decide, common practice), the record has the same orbit,
    traces and CM data as by the absolute factorisation, only no field polynomial (never
    lifted) and no exact a_p."""
    import builder.forms.charforms as cf

    ref = _record(N, k, j)
    monkeypatch.setattr(cf, "RELATIVE_ABOVE", 0)
    U = CharUnit(N, k, character_orbits(N)[j])
    assert [o.relative for o in U.orbits] == [True]
    R = compute_unit(N, k, PARAMS, char_index=j)
    assert R.num_orbits == ref.num_orbits == 1
    (f,), (g,) = R.newforms, ref.newforms
    assert (f.dim, f.rel_dim, f.traces, f.is_cm, f.cm_disc) == (
        g.dim, g.rel_dim, g.traces, g.is_cm, g.cm_disc)
    assert f.field_poly == [] and f.hecke_poly_2 is None and f.ap is None


@pytest.mark.parametrize("N,k,j", [(17, 3, 4), (33, 4, 4), (36, 3, 6)])
def test_relative_split_never_claims_a_reducible_new_part(N, k, j):
    """With several orbits the relative charpoly is reducible over Q(χ), hence modulo every
    prime 𝔩: the relative test must fail (and the absolute factorisation is used)."""
    U = CharUnit(N, k, character_orbits(N)[j])
    assert U._irreducible_combo(tries=3) is None
    assert len(U.orbits) >= 2 and not any(o.relative for o in U.orbits)


@pytest.mark.parametrize("N,k,j,cuts", [
    (86, 2, 4, {"W"}), (90, 2, 4, {"W"}), (114, 2, 8, {"W"}), (62, 4, 3, {"W"}),
    (66, 4, 4, {"W"}), (21, 3, 6, {"CM"}), (49, 3, 3, {"CM"}), (39, 2, 11, {"CM"}),
    (63, 2, 4, {"W", "CM"})])
def test_split_into_pieces_agrees_with_the_absolute_split(N, k, j, cuts):
    """The split over Q(χ) into pieces, forced on units the absolute factorisation also
    splits: the eigenspaces of the W_Q (Q ∥ N, χ trivial modulo Q; W_Q commutes with the
    T_q, q ∤ N, and W_Q² = χ̄_{N/Q}(Q)·Q^(k−2) on newforms, [AL78] §1) and the CM
    subspaces (a_p = 0 for p inert, Ribet §3; as many newforms as Hecke characters) —
    the same orbits (absolute degrees) with the same traces."""
    chi = character_orbits(N)[j]
    U, V = CharUnit(N, k, chi), CharUnit(N, k, chi)
    found = V._irreducible_pieces()
    assert found is not None and len(found[1]) >= 2
    V.__dict__["split"] = found
    assert all(o.relative and o.piece for o in V.orbits)
    assert {e[0] for o in V.orbits for e in o.piece} == cuts
    mine = sorted((o.dim, V.traces(o, 40)) for o in V.orbits)
    assert mine == sorted((o.dim, U.traces(o, 40)) for o in U.orbits)


def test_unit_beyond_the_absolute_method_split_by_atkin_lehner():
    """S_2(886, χ), χ of conductor 443 and order 221: beyond the absolute lift (192·37
    roots) and reducible over Q(χ) — a_2 = ±√χ̄_443(2) on the new part ([AL78] §2, [Mi]
    Thm 4.6.17), both signs in Q(χ) as 221 is odd — so split by W_2 into two pieces, each
    irreducible over Q(χ).  Their traces against the trace formula with character [CS]
    Thm 12.4.11 on the new part, Tr^new_886 = Tr_886 − 2·Tr_443 ([Li]), n ≤ 12 odd, 443 ∤ n."""
    chi = character_orbits(886)[6]
    assert (chi.order, chi.conductor) == (221, 443)
    U = CharUnit(886, 2, chi)
    with pytest.raises(ArithmeticError, match="beyond the absolute method"):
        U.check_liftable()
    assert U._irreducible_combo() is None
    orbits = U.orbits
    assert sorted(o.dim for o in orbits) == [192 * 18, 192 * 19]
    assert [e[:2] for e in orbits[0].piece] == [("W", 2)]
    traces = [U.traces(o, 12) for o in orbits]
    chi443 = next(c for c in character_orbits(443) if c.order == 221)
    for n in range(1, 13, 2):
        new = (trace_hecke_char(n, (886, 221, chi.exps), 2).trace()
               - 2 * trace_hecke_char(n, (443, 221, _restricted(chi, chi443)), 2).trace())
        assert sum(t[n - 1] for t in traces) == new, n


def _restricted(chi, target) -> tuple:
    """The exponents of the character mod 443 that χ mod 886 is induced from: the member
    of ``target``'s Galois orbit taking χ's values (target.exps scaled by a unit)."""
    M = target.modulus
    for a in range(1, target.order):
        if gcd(a, target.order) != 1:
            continue
        exps = tuple(-1 if e < 0 else e * a % target.order for e in target.exps)
        if all(exps[n % M] == chi.exps[n] for n in range(chi.modulus) if chi.exps[n] >= 0):
            return exps
    raise AssertionError("no conjugate matches")


def test_large_unit_split_over_q_chi_against_the_trace_formula():
    """S_2(1000, χ), χ primitive of order 100 (absolute degree 40·148 = 5920): T_3 alone
    has a square relative charpoly (it cannot separate f from a twist f ⊗ ψ with ψ(3) =
    1), T_3 + T_7 is squarefree and irreducible over Q(χ) by the subset sums of its degree
    patterns modulo the primes 𝔩; the one orbit's
    traces against the trace formula with character [CS] Thm 12.4.11 (the whole space is
    new: χ is primitive), n ≤ 20 coprime to 1000."""
    chi = character_orbits(1000)[34]
    assert (chi.order, chi.conductor) == (100, 1000)
    U = CharUnit(1000, 2, chi)
    combo, orbits = U.split
    assert combo[0] == ((3, 1), (7, 1)) and [(o.relative, o.dim) for o in orbits] == [
        (True, 5920)]
    traces = U.traces(orbits[0], NMAX)
    for n in range(1, NMAX + 1):
        if gcd(n, 10) == 1:
            rhs = trace_hecke_char(n, (1000, 100, chi.exps), 2).trace()
            assert traces[n - 1] == rhs, n
