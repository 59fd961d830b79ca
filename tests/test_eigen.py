"""Eigen-functionals and exact eigenvalues of one orbit (builder.forms.eigen, builder.forms.unit).

Sources: [St] W. Stein, Modular Forms: A Computational Approach, §9.3 (eigenvalues from one
dual eigenvector: φ∘T_n = a_n φ); [DS] Prop. 5.8.5 (a_1 = 1, multiplicativity, Hecke
recursion — numbering from memory); [AL] Thm 3 (a_p at p | N); [De] Deligne's bound;
OEIS A000594 (τ); [Cr] Table 1 (11a1, from memory); [MO] (η(z)²η(11z)²).
"""

from __future__ import annotations

from fractions import Fraction
from functools import cache

import flint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from builder.forms.eigen import EigenForm, prove_exact_duals, traces_in_quotient
from builder.forms.fields import _power_sums
from builder.forms.newspace import new_space
from builder.forms.unit import all_traces, cm_discriminant, exact_an, hecke_traces
from tests import oracles as o
from tests.forms_oracles import (
    CURVES,
    Field,
    curve_ap,
    evaluate,
    factorize,
    primes_upto,
    real_embeddings,
)


@cache
def eigenforms(N: int, k: int) -> tuple:
    V = new_space(N, k)
    return tuple(EigenForm(V, orb) for orb in V.orbits())


def coords(E: EigenForm, a) -> list[Fraction]:
    """Power-basis coordinates (in the orbit's own generator α) of an element of K."""
    c = [Fraction(int(x.p), int(x.q)) for x in a.coeffs()]
    return c + [Fraction(0)] * (E.d - len(c))


def field(E: EigenForm) -> Field:
    return Field([int(c) for c in E.orbit.poly.coeffs()])


CASES = [(11, 2), (23, 2), (37, 2), (63, 2), (125, 2), (1, 12), (1, 24), (13, 4), (28, 4), (7, 6)]


@pytest.mark.parametrize("N,k", CASES)
def test_functional_is_an_eigenvector_on_every_manin_symbol(N, k):
    # [St] §9.3: φ∘T_n = a_n φ.  T_p of each Manin symbol by SymbolSpace.hecke_on_symbol (Merel),
    # independent of the single Heilbronn sum at x0 that E.ap uses.
    for E in eigenforms(N, k):
        S = E.space
        free = S.pres.free
        K = field(E)
        phi_free = [E.phi(x) for x in free]
        for p in primes_upto(7):
            a = E.ap(p)
            for x in range(0, S.pres.nsym, max(1, S.pres.nsym // 40)):
                img = S.hecke_on_symbol(p, x)
                lhs = flint.fmpq_poly([0])
                for t, c in img.items():
                    c = Fraction(c)
                    lhs += phi_free[t] * flint.fmpq(c.numerator, c.denominator)
                lhs = lhs % K.g
                assert lhs == K.mul(a, E.phi(x)), (N, k, p, x)


@pytest.mark.parametrize("N,k", CASES)
def test_exact_ap_properties(N, k):
    for E in eigenforms(N, k):
        K = field(E)
        # a_q of the splitting prime is the generator α of K = Q[x]/(charpoly of T_q)
        if E.d > 1:
            q = E.orbit.prime  # T_q, or a combination ((q, c), …) of them
            alpha = E.ap(q) if isinstance(q, int) else sum((E.ap(p) * c for p, c in q),
                                                           K.elt([0]))
            assert alpha == K.elt([0, 1])
        _, reals = real_embeddings(tuple(int(c) for c in E.orbit.poly.coeffs()))
        assert len(reals) == E.d  # totally real ([DS] Thm 5.5.3, from memory)
        for p in primes_upto(60):
            a = E.ap(p)
            cp = K.charpoly(a)  # asserts integrality: a_p is an algebraic integer ([DS] §6.5)
            assert len(cp) == E.d + 1
            e = factorize(N).get(p, 0)
            if e == 1:  # [AL] Thm 3
                assert a == K.elt([-(p ** (k // 2 - 1)) * E.orbit.signs[p]])
            elif e >= 2:
                assert a == K.elt([0])
            else:  # Deligne in every real embedding [De]
                for r in reals:
                    v = evaluate(coords(E, a), r)
                    assert v * v <= 4 * p ** (k - 1), (N, k, p)
            # the same a_p reduced mod a prime (the engine works modulo primes below 2^21)
            ell = 2_097_143
            am = E.ap_mod(p, ell)
            c = coords(E, a)
            assert all(x.denominator % ell for x in c)
            want = [x.numerator * pow(x.denominator, -1, ell) % ell for x in c]
            got = [int(x) for x in am.coeffs()] + [0] * (E.d - len(am.coeffs()))
            assert got == want, (N, k, p)


def test_ap_rejects_composite_index():
    (E,) = eigenforms(11, 2)
    for n in (1, 4, 6, 0):
        with pytest.raises(ValueError):
            E.ap(n)


def test_delta_eigenvalues_are_tau():
    # OEIS A000594: τ(p) for p ≤ 100 from Δ = q∏(1 − qⁿ)²⁴, expanded in tests/oracles.py
    tau = o.ramanujan_tau(100)
    (E,) = eigenforms(1, 12)
    for p in primes_upto(100):
        assert E.ap(p) == flint.fmpq_poly([tau[p - 1]])


def test_level11_eigenvalues_are_point_counts_and_eta_coefficients():
    # [Cr] Table 1, 11a1 (from memory): a_p = p + 1 − #E(F_p); [MO]: f = η(z)²η(11z)².
    (E,) = eigenforms(11, 2)
    ainv = CURVES["11a1"]["ainv"]
    eta = o.eta_product({1: 2, 11: 2}, 300)
    for p in primes_upto(300):
        a = E.ap(p)
        assert a == flint.fmpq_poly([eta[p - 1]])
        if p != 11:
            assert a == flint.fmpq_poly([curve_ap(ainv, p)])
    an = exact_an(E, 300, E.ap)
    assert all(an[n] == flint.fmpq_poly([eta[n - 1]]) for n in range(1, 301))


@pytest.mark.parametrize("N,k", [(23, 2), (125, 2), (1, 24), (28, 4), (63, 2)])
def test_traces_are_traces_of_the_exact_coefficients(N, k):
    # Tr a_n from the modular lift (unit.all_traces) = Tr of exact a_n built from exact a_p
    # by multiplicativity and the Hecke recursion (written here, [DS] Prop. 5.8.5)
    B = 60
    eigs = eigenforms(N, k)
    traces = all_traces(list(eigs), B)
    for E, tr in zip(eigs, traces, strict=True):
        K = field(E)
        assert tr == hecke_traces(E, B)
        a = {1: K.elt([1])}
        for p in primes_upto(B):
            ap = E.ap(p)
            prev2, prev, q = K.elt([1]), ap, p
            a[p] = ap
            while q * p <= B:
                nxt = K.mul(ap, prev) - (prev2 * p ** (k - 1) if N % p else 0)
                prev2, prev, q = prev, nxt, q * p
                a[q] = nxt
        for n in range(2, B + 1):
            f = factorize(n)
            if len(f) > 1:
                v = K.elt([1])
                for p, e in f.items():
                    v = K.mul(v, a[p**e])
                a[n] = v
        assert tr == [int(K.trace(a[n])) for n in range(1, B + 1)], (N, k)
        assert tr[0] == E.d
        # builder's exact_an agrees as elements
        ex = exact_an(E, B, E.ap)
        assert all(ex[n] == a[n] for n in range(1, B + 1))


@pytest.mark.parametrize(
    "N,D",
    # CM curves of [Cr] Table 1 (j-invariants from memory): 27a j = 0, 32a j = 1728, 36a j = 0,
    # 49a j = −3375 = −15³ (CM by Z[(1+√−7)/2]); 11a, 37a, 37b have no CM.
    [(27, -3), (32, -4), (36, -3), (49, -7), (11, None), (37, None)],
)
def test_cm_discriminant_of_rational_forms(N, D):
    rational = [E for E in eigenforms(N, 2) if E.d == 1]
    got = sorted(cm_discriminant(E) or 0 for E in rational)
    want = [D or 0] * len(rational)
    assert got == want
    if D is not None:
        # CM by D: a_p = 0 for p ∤ N inert in Q(√D) ([Ri] §3, see tests/forms_oracles.py)
        (E,) = rational
        from tests.forms_oracles import kronecker

        for p in primes_upto(200):
            if N % p and kronecker(D, p) == -1:
                assert E.ap(p) == flint.fmpq_poly([0])


def test_delta_has_no_cm():
    (E,) = eigenforms(1, 12)
    assert cm_discriminant(E) is None


@settings(max_examples=80, deadline=None)
@given(st.lists(st.integers(-50, 50), min_size=2, max_size=12), st.integers(0, 10**6))
def test_trace_in_quotient_is_the_sum_over_the_roots(coeffs, seed):
    """Tr(x(α)) from one product x·f′ mod f agrees with the power sums of the roots of f
    (Newton's identities, over Q; then reduced modulo ℓ) — common practice."""
    import random

    f_q = flint.fmpz_poly(coeffs + [1])  # monic
    d = f_q.degree()
    rng = random.Random(seed)
    xs = [[rng.randrange(-9, 10) for _ in range(d)] for _ in range(5)]
    ell = 1_000_003
    p = _power_sums(f_q, d)
    want = [sum(c * p[j] for j, c in enumerate(x)) % ell for x in xs]
    f = flint.nmod_poly([int(c) for c in f_q.coeffs()], ell)
    got = traces_in_quotient([flint.nmod_poly(x, ell) for x in xs], f)
    assert [int(t) for t in got] == want


@pytest.mark.parametrize("N", [210, 330, 390])
def test_batched_exact_duals_are_the_orbit_duals(N):
    """prove_exact_duals (all rational orbits' checks in one product per operator) gives
    each orbit the exact functional its own lazy proof gives (common practice: the same
    object by two routes), and that functional is a T_q-eigenvector with the orbit's
    eigenvalue vanishing on the old conditions."""
    lazy = [E for E in eigenforms(N, 2) if E.d == 1]
    V = new_space(N, 2)
    batch = [E for E in (EigenForm(V, orb) for orb in V.orbits()) if E.d == 1]
    assert len(batch) >= 3
    prove_exact_duals(batch)
    for E, F in zip(batch, lazy, strict=True):
        assert "_exact_dual" in E.__dict__  # proved by the batch, not lazily
        U, R = E.__dict__["_exact_dual"], F._exact_dual
        assert U.den == R.den and (U.num == R.num).all()
        q = E.orbit.prime
        TU = V.apply_exact("T", q, U.num)
        a_q = -int(E.orbit.poly.coeffs()[0])  # poly = x − a_q
        assert (TU == a_q * V.full_op("T", q).den * U.num).all()  # T_q·u = a_q·u
        assert not V.apply_exact("old", 0, U.num).any()
