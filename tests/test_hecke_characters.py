"""Hecke characters of imaginary quadratic fields, the CM count (forms/hecke_characters.py).

Sources:
[Co93] H. Cohen, A Course in Computational Algebraic Number Theory, Springer (1993):
       Dirichlet's class number formula h(D) = −(1/|D|)·Σ_{0<a<|D|} a·(D/a) for D < −4
       (§5.3, from memory), and the number of ideals of norm n, Σ_{d | n} (D/d) (the
       coefficients of ζ_K = ζ·L(s, χ_D), §10.x, common practice).
[HSB]  Heegner–Stark–Baker: h(D) = 1 exactly for D ∈ {−3, −4, −7, −8, −11, −19, −43, −67,
       −163} among fundamental D < 0.
[Cr]   J. E. Cremona, Algorithms for Modular Elliptic Curves, Table 1 (CM curves from
       memory): 27a, 36a (j = 0), 32a, 64a (j = 1728), 49a (j = −3375), 121b (j = −2¹⁵).
[YM]   Y. Martin, Multiplicative η-quotients, Trans. AMS 348 (1996), Table I (from memory):
       η(4z)⁶ ∈ S_3(16, χ_−4) and η(z)³η(7z)³ ∈ S_3(7, χ_−7), one-dimensional spaces
       whose forms have CM by Q(i) and Q(√−7).
The independent check of the count is the Sturm-bound proof of CM it replaces: every
orbit of every space below is walked over all inert primes up to Sturm(lcm(N, D²)), and
the newforms that survive must number exactly what the Hecke characters count.
"""

from __future__ import annotations

from math import gcd

import pytest

from builder.arith import sturm_bound
from builder.characters import character_orbits
from builder.checks.formulas import class_number
from builder.forms.charforms import CharUnit
from builder.forms.hecke_characters import QuadraticOrder, cm_newform_count, ideals_of_norm
from tests.forms_oracles import is_fundamental_discriminant, kronecker, primes_upto

FUNDAMENTAL = [D for D in range(-3, -400, -1) if is_fundamental_discriminant(D)]


def _trivial(n: int) -> int:
    return 0


@pytest.mark.parametrize("D", FUNDAMENTAL)
def test_class_number_against_dirichlet_formula(D):
    """[Co93] §5.3: h(D) = −(1/|D|)·Σ a·(D/a) for D < −4; [HSB] for the nine of h = 1."""
    h = class_number(D)
    if D < -4:
        s = sum(a * kronecker(D, a) for a in range(1, -D))
        assert s % D == 0
        assert h == -s // -D
    assert (h == 1) == (D in (-3, -4, -7, -8, -11, -19, -43, -67, -163))


@pytest.mark.parametrize("D", [-3, -4, -7, -8, -15, -20, -24, -23, -84])
def test_ideals_of_norm_count_and_norm(D):
    """[Co93]: the number of ideals of norm n is Σ_{d | n} (D/d); each lattice has index n
    in O and is closed under multiplication by ω (an ideal)."""
    O = QuadraticOrder(D)
    for n in range(1, 200):
        ideals = ideals_of_norm(O, n)
        assert len(ideals) == sum(kronecker(D, d) for d in range(1, n + 1) if n % d == 0)
        for fac in ideals:
            I = (1, 0, 1)
            for P, _, e in fac:
                for _ in range(e):
                    I = O.ideal_mul(I, P)
            assert I[0] * I[2] == n
            for v in ((I[0], I[1]), (0, I[2])):
                assert O.reduce(I, O.mul(v, (0, 1))) == (0, 0)


@pytest.mark.parametrize("N,D", [(27, -3), (32, -4), (36, -3), (49, -7), (64, -4), (121, -11)])
def test_count_of_rational_cm_curves(N, D):
    """[Cr] Table 1: these levels carry exactly one newform of weight 2 with CM by D, and
    it is rational (dim S_2^new = 1 at 27, 32, 36, 49, 64; 121 has four rational forms,
    one with CM)."""
    assert cm_newform_count(D, N, 2, 1, _trivial) == 1


def test_no_cm_at_level_11():
    """[Cr] Table 1: 11a, the only newform of weight 2 and level 11, has no CM: no Hecke
    character of Q(√−11) of conductor 1 has infinity type α (its units ±1 would need
    (−1)¹ = 1)."""
    assert cm_newform_count(-11, 11, 2, 1, _trivial) == 0
    assert cm_newform_count(-11, 11, 3, 1, _trivial) == 0  # χ(−1) = 1 ≠ (−1)³


@pytest.mark.parametrize("N,k,D", [(16, 3, -4), (7, 3, -7)])
def test_count_of_eta_quotients_with_cm(N, k, D):
    """[YM]: the odd-weight η-quotients are the only newforms of their space and have CM."""
    chi = next(c for c in character_orbits(N) if c.order == 2 and c.conductor == -D)
    assert cm_newform_count(D, N, k, 2, chi.exponent) == 1


def test_count_needs_the_parity_of_the_weight():
    """χ(−1) = (−1)^k is needed for S_k(N, χ) ≠ 0 (common practice): the count is 0 else."""
    chi = next(c for c in character_orbits(16) if c.order == 2 and c.conductor == 4)
    assert cm_newform_count(-4, 16, 2, 2, chi.exponent) == 0


def _walk(U: CharUnit, D: int) -> int:
    """The newforms of U proved CM by D the long way: a_p = 0 at every inert p up to the
    Sturm bound of lcm(N, D²) (the statement of builder.forms.unit.cm_discriminant)."""
    L = U.N * D * D // gcd(U.N, D * D)
    inert = [p for p in primes_upto(sturm_bound(L, U.k)) if kronecker(D, p) == -1]
    return sum(o.dim // U.phi_m for o in U.orbits
               if all(U.ap_is_zero(o, p) for p in inert))


CHAR_UNITS = [(N, k, c.index) for N in range(3, 81) for k in (2, 3, 4)
              for c in character_orbits(N)
              if c.index and c.parity == (-1) ** k and N * k * k <= 800
              and any(N % D == 0 for D in (-3, -4, -7, -8, -11, -15, -19, -20, -24, -35, -39))]


@pytest.mark.parametrize("N,k,j", CHAR_UNITS)
def test_count_agrees_with_the_sturm_walk_with_character(N, k, j):
    chi = character_orbits(N)[j]
    U = CharUnit(N, k, chi)
    for D in FUNDAMENTAL:
        if N % D == 0:
            assert cm_newform_count(D, N, k, chi.order, chi.exponent) == _walk(U, D), D


@pytest.mark.parametrize("k", [2, 4, 6])
def test_count_agrees_with_the_sturm_walk_trivial_character(k):
    from builder.forms.eigen import EigenForm
    from builder.forms.newspace import NewSpace
    from builder.forms.unit import _ap_is_zero
    from builder.symbols.space import cuspidal_space

    for N in range(3, 121 if k == 2 else 61):
        Ds = [D for D in FUNDAMENTAL if N % D == 0]
        if not Ds:
            continue
        V = NewSpace(cuspidal_space(N, k, 1))
        eigs = [EigenForm(V, o) for o in V.orbits()]
        for D in Ds:
            L = N * D * D // gcd(N, D * D)
            inert = [p for p in primes_upto(sturm_bound(L, k)) if kronecker(D, p) == -1]
            walked = sum(E.d for E in eigs if all(_ap_is_zero(E, p) for p in inert))
            assert cm_newform_count(D, N, k, 1, _trivial) == walked, (N, D)
