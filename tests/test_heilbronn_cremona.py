"""Cremona's Heilbronn matrices for odd primes give the same T_p as Merel's set.

Source: J. Cremona, Algorithms for Modular Elliptic Curves (2nd ed.), §2.4
(Heilbronn matrices from continued fractions); L. Merel, Universal Fourier
expansions of modular forms (LNM 1585), the set X_n.  Both sums must define the
same operator on Manin symbols of any weight; we compare the exact matrices.
"""

from __future__ import annotations

import pytest

from builder.symbols.heilbronn import _nearest, cremona_prime, merel
from builder.symbols.manin import poly_action
from builder.symbols.space import SymbolSpace, _add_into


def _t_with(S: SymbolSpace, mats) -> object:
    a, b, c, d = (m.tolist() for m in mats)
    rows = []
    for x in S.pres.free:
        i, j = divmod(x, S.psi)
        u, v = int(S.P1.c[j]), int(S.P1.d[j])
        acc: dict = {}
        for h in range(len(a)):
            t = S.P1.index_one(u * a[h] + v * c[h], u * b[h] + v * d[h])
            if t < 0:
                continue
            for m, coef in enumerate(poly_action(a[h], b[h], c[h], d[h], S.w)[i]):
                if coef:
                    _add_into(acc, S.pres.coords(m * S.psi + t), coef)
        rows.append(acc)
    return S.restrict(rows)


@pytest.mark.parametrize("N,k", [(11, 2), (37, 2), (60, 2), (91, 2), (23, 4), (30, 6), (1, 12)])
def test_cremona_equals_merel(N, k):
    S = SymbolSpace(N, k, 1)
    for p in (3, 5, 7, 11, 13):
        assert _t_with(S, cremona_prime(p)) == _t_with(S, merel(p)), (N, k, p)


def test_every_matrix_has_determinant_p():
    for p in (3, 5, 97, 997):
        a, b, c, d = cremona_prime(p)
        assert ((a * d - b * c) == p).all()


def test_fewer_matrices_than_merel():
    # common practice: the continued-fraction set is about a third of X_p
    assert len(cremona_prime(997)[0]) < len(merel(997)[0]) / 2


def test_nearest_integer_ties_to_even():
    assert [_nearest(a, 2) for a in (1, 3, 5, -1, -3)] == [0, 2, 2, 0, -2]
    assert _nearest(7, -3) == -2 and _nearest(8, 3) == 3
    with pytest.raises(ValueError):
        cremona_prime(2)
