"""Merel's Heilbronn matrices of determinant n (builder.symbols.heilbronn)."""

from __future__ import annotations

import numpy as np
import pytest

from builder.symbols.heilbronn import merel


def _brute_merel(n: int) -> set[tuple[int, int, int, int]]:
    """X_n = {[[a, b], [c, d]] : ad − bc = n, a > b ≥ 0, d > c ≥ 0} by enumeration ([Me] §2).

    Bounds: bc ≤ (a − 1)(d − 1), so n = ad − bc ≥ a + d − 1 and a, d ≤ n.
    """
    out = set()
    for a in range(1, n + 1):
        for d in range(1, n + 2 - a):
            for b in range(a):
                for c in range(d):
                    if a * d - b * c == n:
                        out.add((a, b, c, d))
    return out


def _as_tuples(n: int) -> list[tuple[int, int, int, int]]:
    a, b, c, d = merel(n)
    return list(zip(a.tolist(), b.tolist(), c.tolist(), d.tolist(), strict=True))


@pytest.mark.parametrize("n", range(1, 31))
def test_merel_set_equals_brute_force(n):
    # Merel's set X_n ([Me] §2; [St] §8.3.2, "Merel's Heilbronn matrices"), no repeats.
    got = _as_tuples(n)
    assert len(got) == len(set(got))
    assert set(got) == _brute_merel(n)


@pytest.mark.parametrize("n", [1, 2, 7, 60, 97, 128, 360, 1009, 1155])
def test_every_matrix_has_det_n_and_the_inequalities(n):
    # ad − bc = n, a > b ≥ 0, d > c ≥ 0 (the defining conditions of X_n, [Me]).
    a, b, c, d = merel(n)
    assert np.all(a * d - b * c == n)
    assert np.all(a > b) and np.all(b >= 0) and np.all(d > c) and np.all(c >= 0)
    assert len(np.unique(np.stack([a, b, c, d], axis=1), axis=0)) == len(a)


def test_small_cases_by_hand():
    # X_1 = {1}; X_2 = {[[1,0],[0,2]], [[2,0],[0,1]], [[2,1],[0,1]], [[1,0],[1,2]]} ([St] §8.3.2).
    assert set(_as_tuples(1)) == {(1, 0, 0, 1)}
    assert set(_as_tuples(2)) == {(1, 0, 0, 2), (2, 0, 0, 1), (2, 1, 0, 1), (1, 0, 1, 2)}


def test_size_is_n_log_n_sized():
    # |X_n| = O(n log n) ([Me] §2); a sanity bound (the exact sets for n ≤ 30 are checked above).
    for n in (100, 500, 1000):
        size = len(merel(n)[0])
        assert n <= size <= 12 * n * (1 + int(np.log(n))), (n, size)


def test_bad_index():
    for bad in (0, -1):
        with pytest.raises(ValueError, match=r"\bn\b"):
            merel(bad)
    with pytest.raises(ValueError, match=r"\bn\b"):
        merel(2.0)


@pytest.mark.parametrize(("n", "u", "v", "N"), [(2053, 3, 7, 744), (4099, 1, 0, 97),
                                                 (4099, 0, 1, 11), (2048, 5, 2, 63),
                                                 (15, 2, 3, 28)])
def test_heilbronn_points_are_the_images_of_the_set(n, u, v, N):
    # the recurrence run on z = u·x + v·y must give, as a multiset, the points (u, v)·h
    # of the matrices h of hecke_matrices (Cremona [Cr] §2.4 for primes, Merel otherwise)
    from builder.symbols.heilbronn import hecke_matrices, heilbronn_points

    a, b, c, d = hecke_matrices(n)
    want = sorted(zip(np.mod(u * a + v * c, N).tolist(), np.mod(u * b + v * d, N).tolist(),
                      strict=True))
    C, D = heilbronn_points(n, u, v, N)
    assert sorted(zip(C.tolist(), D.tolist(), strict=True)) == want


def test_any_order_is_the_same_set():
    # a Heilbronn sum does not depend on the order: the unsorted set of a large prime
    # must be the sorted one as a multiset (common practice)
    from builder.symbols.heilbronn import hecke_matrices, heilbronn_matrices_any_order

    for n in (2053, 2089, 12, 2048):
        want = sorted(zip(*(x.tolist() for x in hecke_matrices(n)), strict=True))
        got = sorted(zip(*(x.tolist() for x in heilbronn_matrices_any_order(n)), strict=True))
        assert got == want
