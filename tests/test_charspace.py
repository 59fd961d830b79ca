"""Modular symbols with a character modulo ℓ (builder/symbols/charspace.py).

Sources: the Manin-symbol presentation with character and Merel's Hecke operators follow
[St] W. Stein, *Modular Forms: A Computational Approach*, AMS GSM 79 (2007), §8.3–8.4; the
trivial-character comparisons are against our exact Γ0(N) engine (builder/symbols/space.py),
itself checked against published tables in tests/test_space.py.
"""

from __future__ import annotations

import flint
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from builder.characters import character_orbit, character_orbits, primes_one_mod
from builder.symbols.charspace import char_space, poly_action_mod
from builder.symbols.manin import poly_action
from builder.symbols.space import SymbolSpace, poly_action_row

ELL = 1000003


def _nmod_charpoly(A: np.ndarray, ell: int) -> flint.nmod_poly:
    return flint.nmod_mat(A.astype(np.int64).tolist(), ell).charpoly()


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(-200, 200), min_size=4, max_size=4), st.integers(0, 10))
def test_vectorised_polynomial_action_matches_the_exact_one(abcd, w):
    """Property (common practice): the action mod ℓ is the reduction of the exact one."""
    a, b, c, d = (np.array([x], dtype=np.int64) for x in abcd)
    A = poly_action_mod(a, b, c, d, w, ELL)[0]
    B = np.array([[x % ELL for x in row] for row in poly_action(*abcd, w)], dtype=np.int64)
    assert (A == B).all()


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(-10**6, 10**6), min_size=4, max_size=4), st.integers(0, 14),
       st.integers(0, 14))
def test_one_row_of_the_polynomial_action(abcd, w, i):
    """Row i alone (one Manin symbol's monomial) = row i of the exact action, mod ℓ
    (common practice: the binomial expansion of (aX + bY)^i (cX + dY)^(w−i))."""
    i = min(i, w)
    a, b, c, d = (np.array([x], dtype=np.int64) for x in abcd)
    row = poly_action_row(a, b, c, d, i, w, ELL)[0]
    assert row.tolist() == [x % ELL for x in poly_action(*abcd, w)[i]]


@pytest.mark.parametrize("N,k", [(11, 2), (23, 4), (15, 6), (36, 4), (8, 8), (1, 12)])
def test_trivial_character_gives_the_gamma0_hecke_operators(N, k):
    """With χ trivial the space is M_k(Γ0(N))⁺: the charpolys of T_n agree with the exact
    engine's reduced mod ℓ ([St] §8.3: χ = 1 gives back the Γ0(N) relations)."""
    M = char_space(N, k, character_orbit(N, 0), 1, ELL)
    S = SymbolSpace(N, k, 1)
    for n in (2, 3, 5, 9):
        exact = S.hecke_full(n).charpoly()
        want = flint.nmod_poly([int(c.p) * pow(int(c.q), -1, ELL) % ELL
                                for c in exact.coeffs()], ELL)
        assert _nmod_charpoly(M.hecke(n), ELL) == want, (N, k, n)


@pytest.mark.parametrize("N,k,j", [(13, 2, 4), (7, 3, 1), (16, 3, 4), (25, 2, 4), (11, 3, 3)])
def test_hecke_operators_commute_and_carry_the_nebentypus(N, k, j):
    """T_m T_n = T_n T_m, and on M_k(N, χ): T_p² − T_{p²} = χ(p) p^(k−1) (p ∤ N), the
    Hecke relation with character ([DS] F. Diamond, J. Shurman, A First Course in Modular
    Forms, Prop. 5.2.4)."""
    chi = character_orbit(N, j)
    ell = next(primes_one_mod(chi.order))
    M = char_space(N, k, chi, 1, ell)
    values = chi.values_mod(ell)
    for p in (2, 3, 5):
        if N % p == 0:
            continue
        Tp, Tp2 = M.hecke(p), M.hecke(p * p)
        lhs = np.mod(np.mod(Tp @ Tp, ell) - Tp2, ell)
        rhs = np.mod(np.eye(M.dim) * (int(values[p % N]) * pow(p, k - 1, ell)), ell)
        assert (lhs == rhs).all(), p
    T2, T3 = M.hecke(2), M.hecke(3)
    assert (np.mod(T2 @ T3 - T3 @ T2, ell) == 0).all()


def test_images_of_one_symbol_are_rows_of_the_matrix():
    """hecke_of_symbol(x, ns) (one Heilbronn sum per n) = row x of T_n (common practice)."""
    N, k = 27, 2
    chi = character_orbits(N)[4]
    ell = next(primes_one_mod(chi.order))
    M = char_space(N, k, chi, 1, ell)
    for i, x in enumerate(M.free[:3]):
        rows = M.hecke_of_symbol(int(x), [2, 5, 7])
        for r, n in enumerate((2, 5, 7)):
            assert (rows[r] == M.hecke(n)[i]).all()
