"""Process-wide cache of symbol spaces shared by the engine tests (construction is the cost)."""

from __future__ import annotations

from builder.symbols.space import SymbolSpace

_CACHE: dict[tuple[int, int, int], SymbolSpace] = {}

#: spaces of level ≤ this are kept (they are reused by the trace and relation tests)
CACHE_MAX_LEVEL = 64


def space(N: int, k: int, sign: int = 1) -> SymbolSpace:
    """SymbolSpace(N, k, sign), cached for small levels."""
    key = (N, k, sign)
    S = _CACHE.get(key)
    if S is None:
        S = SymbolSpace(N, k, sign)
        if N <= CACHE_MAX_LEVEL:
            _CACHE[key] = S
    return S


def trace(M) -> int:
    """Trace of a square fmpq_mat as an int (it must be integral for Hecke operators)."""
    from fractions import Fraction

    t = sum((Fraction(int(M[i, i].p), int(M[i, i].q)) for i in range(M.nrows())), Fraction(0))
    assert t.denominator == 1, t
    return int(t)
