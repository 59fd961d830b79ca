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


def _sequential(p: int) -> list[tuple[int, int, int, int]]:
    """[Cr] §2.4 written out one r at a time: [[1, 0], [0, p]], then for |r| < p/2 the
    matrices met while expanding −p/r by nearest-integer continued fractions."""
    out = [(1, 0, 0, p)]
    for r in range(-(p // 2), p // 2 + 1):
        x1, x2, y1, y2, a, b = p, -r, 0, 1, -p, r
        out.append((x1, x2, y1, y2))
        while b != 0:
            q = _nearest(a, b)
            a, b = -b, a - b * q
            x1, x2 = x2, q * x2 - x1
            y1, y2 = y2, q * y2 - y1
            out.append((x1, x2, y1, y2))
    return out


@pytest.mark.parametrize("p", [3, 5, 7, 11, 101, 997, 7919])
def test_vectorised_set_is_the_sequential_one(p):
    """The numpy construction (all r in lockstep) gives the same matrices in the same
    order as the expansion r by r, and every matrix has determinant p."""
    a, b, c, d = cremona_prime(p)
    assert list(zip(a.tolist(), b.tolist(), c.tolist(), d.tolist(), strict=True)) == (
        _sequential(p))
    assert set((a * d - b * c).tolist()) == {p}
