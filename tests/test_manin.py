"""Manin symbols and the presentation by relations (builder.symbols.manin)."""

from __future__ import annotations

from fractions import Fraction

import pytest

from builder.symbols.manin import ManinPresentation
from tests import oracles as o

SIGMA = (0, -1, 1, 0)
TAU = (0, -1, 1, -1)


def _add(acc: dict, vec: dict, scale=1) -> None:
    for t, v in vec.items():
        s = acc.get(t, 0) + scale * v
        if s:
            acc[t] = s
        else:
            acc.pop(t, None)


def _act(P: ManinPresentation, x: int, h: tuple[int, int, int, int]) -> dict:
    """Coordinates of [X^i Y^(w−i), (c:d)]·h = [(X^i Y^(w−i))|h, (c:d)h] ([St] §8.2), by hand."""
    i, j = divmod(x, P.psi)
    c, d = int(P.P1.c[j]), int(P.P1.d[j])
    a_, b_, c_, d_ = h
    jj = P.P1.index_one(c * a_ + d * c_, c * b_ + d * d_)
    out: dict = {}
    if jj < 0:
        return out
    for m, coef in enumerate(o.act_monomial(i, P.w, h)):
        if coef:
            _add(out, P.coords(m * P.psi + jj), coef)
    return out


def _star(P: ManinPresentation, x: int) -> dict:
    """x* = [P(−X, Y), (−c : d)] (η = [[−1, 0], [0, 1]]; design.md §3, [St] §8.2)."""
    return _act(P, x, (-1, 0, 0, 1))


def _check_relations(P: ManinPresentation) -> None:
    for x in range(P.nsym):
        r: dict = {}
        _add(r, P.coords(x))
        _add(r, _act(P, x, SIGMA))
        assert r == {}, ("x + xσ", x)
        r = {}
        _add(r, P.coords(x))
        _add(r, _act(P, x, TAU))
        i, j = divmod(x, P.psi)
        # xτ² computed as the action of τ² = [[−1, 1], [−1, 0]]
        _add(r, _act(P, x, (-1, 1, -1, 0)))
        assert r == {}, ("x + xτ + xτ²", x)
        if P.sign:
            r = dict(P.coords(x))
            _add(r, _star(P, x), -P.sign)
            assert r == {}, ("x − s x*", x)


@pytest.mark.parametrize(
    "N,k,sign",
    [(N, 2, s) for N in (1, 2, 11, 12, 37, 64, 90, 121) for s in (-1, 0, 1)]
    + [(N, k, s) for N in (1, 5, 11, 12, 27) for k in (4, 6) for s in (-1, 0, 1)]
    + [(1, 12, 1), (3, 12, 0), (2, 10, -1)],
)
def test_relations_hold_in_coordinates(N, k, sign):
    # Every Manin symbol's coordinates satisfy x + xσ = 0, x + xτ + xτ² = 0 and x = s·x*
    # ([St] ch. 8, [Me]; design.md §3), and the free generators are a basis.
    P = ManinPresentation(N, k, sign)
    assert P.nsym == (k - 1) * o.psi(N)
    for t, x in enumerate(P.free):
        assert P.coords(x) == {t: 1}
    _check_relations(P)
    for x in range(P.nsym):
        assert all(isinstance(v, (int, Fraction)) for v in P.coords(x).values())
        assert all(0 <= t < P.dim for t in P.coords(x))


def test_design_facts_levels_11_and_64():
    # design.md §3 (checked by hand there): level 11 → 2 (+1) and 1 (−1); level 64 → 10 and 7.
    assert ManinPresentation(11, 2, 1).dim == 2
    assert ManinPresentation(11, 2, -1).dim == 1
    assert ManinPresentation(64, 2, 1).dim == 10
    assert ManinPresentation(64, 2, -1).dim == 7


def test_weight_two_plus_minus_is_2g_plus_cusps_minus_one():
    # dim M_2(Γ0(N); Q) symbols = 2g + ν∞ − 1 ([Cr] §2.4, [St] §8.4 / Thm 8.4 + genus [DS]);
    # plus + minus = sign 0.
    for N in range(1, 301):
        plus = ManinPresentation(N, 2, 1).dim
        minus = ManinPresentation(N, 2, -1).dim
        full = ManinPresentation(N, 2, 0).dim
        assert plus + minus == full == 2 * o.genus(N) + o.nu_inf(N) - 1, N


@pytest.mark.parametrize("k", [4, 6, 8])
def test_higher_weight_dims(k):
    # dim M_k(Γ0(N)) (symbols, sign 0) = 2 dim S_k + dim E_k, E_k = ν∞ for k ≥ 4 ([St] §8.4,
    # [Me]; dimensions from [DS] Thm 3.5.1), and plus + minus = sign 0.
    top = {4: 60, 6: 40, 8: 25}[k]
    for N in range(1, top + 1):
        full = ManinPresentation(N, k, 0).dim
        assert full == 2 * o.dim_cusp(N, k) + o.dim_eisenstein(N, k), N
        assert ManinPresentation(N, k, 1).dim + ManinPresentation(N, k, -1).dim == full, N


@pytest.mark.parametrize("N,k", [(1, 12), (11, 2), (37, 2), (64, 2), (13, 4), (30, 6)])
def test_winding_element_is_even(N, k):
    # design.md §3: the star's overall sign puts {0, ∞} = [Y^(k−2), (0:1)] in the +1 part,
    # so it vanishes in the −1 quotient and equals its own star.
    P = ManinPresentation(N, k, -1)
    assert P.coords(P.symbol_index(0, 0, 1)) == {}
    Q = ManinPresentation(N, k, 0)
    x = Q.symbol_index(0, 0, 1)
    assert _star(Q, x) == Q.coords(x) != {}


@pytest.mark.parametrize("k", [3, 5, 11])
def test_odd_weight_is_zero_space(k):
    # −1 ∈ Γ0(N) acts by (−1)^k: odd k with trivial character gives 0 (documented in manin.py).
    for N in (1, 7, 12):
        for s in (-1, 0, 1):
            P = ManinPresentation(N, k, s)
            assert P.dim == 0 and P.free == []
            assert all(P.coords(x) == {} for x in range(P.nsym))


def test_bad_input():
    # Bad input raises ValueError naming the argument (issue 2).
    cases = [
        ((0, 2, 1), r"\bN\b"), ((-5, 2, 1), r"\bN\b"), ((11.0, 2, 1), r"\bN\b"),
        ((11, 1, 1), r"\bk\b"), ((11, 0, 1), r"\bk\b"), ((11, 2.5, 1), r"\bk\b"),
        ((11, 2, 2), r"\bsign\b"), ((11, 2, -2), r"\bsign\b"), ((11, 2, 0.5), r"\bsign\b"),
    ]  # fmt: skip
    for args, pattern in cases:
        with pytest.raises(ValueError, match=pattern):
            ManinPresentation(*args)
