"""The projective line P¹(Z/NZ) with a vectorised normal form.

P¹(Z/NZ) is the set of pairs (c, d) with gcd(c, d, N) = 1 modulo the scalars
(Z/NZ)^*; it is in bijection with the right cosets Γ0(N)\\SL2(Z) via
[[a, b], [c, d]] ↦ (c : d), so |P¹(Z/NZ)| = ψ(N) = N ∏_{p|N} (1 + 1/p)
([Cr] §2.2, [St] §8.2).

Normal form (our own, proved in DEVELOPERS.md): for (c : d) put g = gcd(c, N)
and M = N/g.  Scaling by a unit sends c to g, and the units that fix g are
those ≡ 1 (mod M), whose orbit on the second coordinate is everything
congruent modulo M.  Hence a point is determined by the pair (g, r) with

    r = d · (c/g)^{-1}  (mod M),   gcd(r, g, M) = 1,

and every look-up is a gcd, a table inverse and a table index: no Python loop
per point, whole numpy arrays at once.
"""

from __future__ import annotations

from functools import lru_cache
from math import gcd

import numpy as np

from builder.arith import check_level, divisors

TABLE_LEVELS = 1024  # up to this N, look-ups go through an N² table (8 MB at most)


def _inverse_table(m: int) -> np.ndarray:
    """inv[x] = x^{-1} mod m for units x, 0 otherwise (m ≥ 1)."""
    inv = np.zeros(m, dtype=np.int64)
    for x in range(m):
        if gcd(x, m) == 1:
            inv[x] = pow(x, -1, m) if m > 1 else 0
    return inv


class P1:
    """P¹(Z/NZ): points, representatives and a vectorised index look-up.

    Attributes
    ----------
    N : the level.
    c, d : int64 arrays of length ψ(N); (c[i], d[i]) is a representative of
        point i with gcd(c[i], d[i]) = 1 as integers, so it is the bottom row
        of a matrix in SL2(Z).
    """

    def __init__(self, N: int) -> None:
        self.N = check_level(N)
        N = self.N
        self.divisors = divisors(N)
        # slot of each divisor; tables for all divisors concatenated
        self._slot = np.full(N + 1, -1, dtype=np.int64)
        inv_parts, idx_parts, offs = [], [], []
        reps_c: list[int] = []
        reps_d: list[int] = []
        off = 0
        count = 0
        for s, g in enumerate(self.divisors):
            M = N // g
            self._slot[g] = s
            offs.append(off)
            inv_parts.append(_inverse_table(M))
            table = np.full(M, -1, dtype=np.int64)
            h = gcd(g, M)
            for r in range(M):
                if gcd(r, h) == 1:
                    table[r] = count
                    count += 1
                    reps_c.append(0 if g == N else g)
                    reps_d.append(1 if g == N else self._lift(g, M, r))
            idx_parts.append(table)
            off += M
        self._off = np.array(offs, dtype=np.int64)
        self._mod = np.array([N // g for g in self.divisors], dtype=np.int64)
        self._inv = np.concatenate(inv_parts)
        self._idx = np.concatenate(idx_parts)
        self.c = np.array(reps_c, dtype=np.int64)
        self.d = np.array(reps_d, dtype=np.int64)
        self.size = count
        self._slot_list = self._slot.tolist()
        self._off_list = self._off.tolist()
        self._inv_list = self._inv.tolist()
        self._idx_list = self._idx.tolist()

    @staticmethod
    def _lift(g: int, M: int, r: int) -> int:
        """Smallest x ≥ 0 with x ≡ r (mod M) and gcd(x, g) = 1."""
        x = r
        while gcd(x, g) != 1:
            x += M
        return x

    def __len__(self) -> int:
        return self.size

    def index(self, c: np.ndarray, d: np.ndarray) -> np.ndarray:
        """Indices of the points (c : d) for integer arrays c, d (any sign).

        Returns -1 where gcd(c, d, N) ≠ 1 (the pair is not in P¹(Z/NZ)).  For N ≤
        ``TABLE_LEVELS`` and long arrays, one look-up in a table of all N² pairs.
        """
        N = self.N
        c = np.mod(np.asarray(c, dtype=np.int64), N)
        d = np.mod(np.asarray(d, dtype=np.int64), N)
        if N <= TABLE_LEVELS and c.size > N:
            return self._tables[0][c * N + d].astype(np.int64)
        return self._index_reduced(c, d)

    @property
    def _tables(self) -> tuple[np.ndarray, np.ndarray]:
        """(index, λ) for every pair (c, d) mod N, c·N + d (int32; built once, lazily)."""
        if not hasattr(self, "_tabs"):
            N = self.N
            c, d = np.divmod(np.arange(N * N, dtype=np.int64), N)
            j = self._index_reduced(c, d)
            self._tabs = (j.astype(np.int32), self._scalar(j, c, d).astype(np.int32))
        return self._tabs

    def _index_reduced(self, c: np.ndarray, d: np.ndarray) -> np.ndarray:
        """``index`` for c, d already reduced modulo N (the normal form, no table)."""
        N = self.N
        g = np.gcd(c, N)
        g[g == 0] = N
        s = self._slot[g]
        M = self._mod[s]
        off = self._off[s]
        r = (d % M) * self._inv[off + (c // g) % M] % M
        out = self._idx[off + r]
        if N > 1:
            # gcd(c, d, N) = gcd(d, gcd(c, N))
            out[np.gcd(d, g) != 1] = -1
        return out

    def index_one(self, c: int, d: int) -> int:
        """Index of a single point (c : d); -1 if not in P¹(Z/NZ) (scalar fast path)."""
        N = self.N
        c %= N
        d %= N
        if N > 1 and gcd(gcd(c, d), N) != 1:
            return -1
        g = gcd(c, N) or N
        s = self._slot_list[g]
        M = N // g
        off = self._off_list[s]
        r = (d % M) * self._inv_list[off + (c // g) % M] % M
        return self._idx_list[off + r]

    def index_scalar(self, c: np.ndarray, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(j, λ): the point index j and the unit λ mod N with (c, d) ≡ λ·(c_j, d_j) (mod N).

        λ is unique because gcd(c_j, d_j, N) = 1; with x_j c_j + y_j d_j = 1 (an integer
        Bézout pair of the representative) it is λ = x_j c + y_j d.  j = −1, λ = 0 where
        (c : d) is not in P¹(Z/NZ).  Needed for symbols with a character, where
        [P, (λc : λd)] = χ(λ)·[P, (c : d)].
        """
        N = self.N
        c = np.mod(np.asarray(c, dtype=np.int64), N)
        d = np.mod(np.asarray(d, dtype=np.int64), N)
        if N <= TABLE_LEVELS and c.size > N:
            flat = c * N + d
            j, lam = self._tables
            return j[flat].astype(np.int64), lam[flat].astype(np.int64)
        j = self._index_reduced(c, d)
        return j, self._scalar(j, c, d)

    def _scalar(self, j: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
        x, y = self._bezout
        jj = np.maximum(j, 0)
        lam = np.mod(x[jj] * c + y[jj] * d, self.N)
        return np.where(j >= 0, lam, 0)

    @property
    def _bezout(self) -> tuple[np.ndarray, np.ndarray]:
        if not hasattr(self, "_bez"):
            from builder.symbols.heilbronn import _modinv

            c, d = self.c, self.d
            # x c + y d = 1: for c = 0 (then d = 1) take x = 0, y = 1; else y = d^{-1} mod c
            m = np.abs(c)
            zero = m == 0
            y = np.where(zero, d, _modinv(np.where(zero, 1, d), np.where(zero, 1, m)))
            x = np.where(zero, 0, (1 - y * d) // np.where(zero, 1, c))
            self._bez = (x, y)
        return self._bez

    def class_data(self) -> tuple[np.ndarray, np.ndarray]:
        """For each point, the pair (g, r) of its normal form."""
        g = np.where(self.c == 0, self.N, np.gcd(self.c, self.N))
        M = self.N // g
        return g, np.mod(self.d, M)


@lru_cache(maxsize=64)
def p1(N: int) -> P1:
    """Cached P¹(Z/NZ) (the tables depend only on N)."""
    return P1(N)
