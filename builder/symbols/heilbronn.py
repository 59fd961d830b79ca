"""Merel's Heilbronn matrices of determinant n.

X_n = { [[a, b], [c, d]] : ad − bc = n,  a > b ≥ 0,  d > c ≥ 0 }.

Merel's theorem ([Me]; [St] ch. 8, "Merel's formula"): on Manin symbols
of any weight for Γ0(N),

    T_n [P, (u:v)] = Σ_{h ∈ X_n, (u:v)h ∈ P¹(Z/NZ)} [P|h, (u:v)h],

for every n ≥ 1, including n not prime to N (then T_n is the U-operator at
the primes dividing N).

Enumeration (ours): for each a ≥ 1 and 0 ≤ b < a the condition d > c is
c(a − b) < n, and a | n + bc fixes c modulo a/gcd(a, b); the candidates are
laid out with numpy.  The pairs (a, b) make this O(n²) (about 1.6 s at
n = 2310), so odd primes use Cremona's smaller set (``cremona_prime``).
"""

from __future__ import annotations

from functools import cache, lru_cache

import numpy as np

from builder.arith import check_index


def _modinv(x: np.ndarray, m: np.ndarray) -> np.ndarray:
    """x^{-1} mod m elementwise for coprime x, m (m ≥ 1); 0 where m == 1."""
    r0, r1 = m.copy(), np.mod(x, m)
    s0, s1 = np.zeros_like(m), np.ones_like(m)
    while np.any(r1 != 0):
        nz = r1 != 0
        q = np.where(nz, r0 // np.where(nz, r1, 1), 0)
        r0, r1 = np.where(nz, r1, r0), np.where(nz, r0 - q * r1, r1)
        s0, s1 = np.where(nz, s1, s0), np.where(nz, s0 - q * s1, s1)
    return np.mod(s0, m)


@lru_cache(maxsize=2048)
def merel(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Merel's set X_n as four int64 arrays (a, b, c, d), in a fixed order."""
    n = check_index(n, "n")
    a = np.repeat(np.arange(1, n + 1, dtype=np.int64), np.arange(1, n + 1))
    start = np.repeat(np.cumsum(np.arange(0, n)), np.arange(1, n + 1))
    b = np.arange(len(a), dtype=np.int64) - start
    g = np.gcd(a, b)
    ok = n % g == 0
    a, b, g = a[ok], b[ok], g[ok]
    m = a // g
    c0 = np.mod(-(n // g) * _modinv(b // g, m), m)
    cmax = -(-n // (a - b))  # c < n/(a−b)  ⟺  c ≤ ceil(n/(a−b)) − 1
    cnt = np.where(c0 < cmax, (cmax - 1 - c0) // m + 1, 0)
    rep = np.repeat(np.arange(len(a)), cnt)
    first = np.repeat(np.cumsum(cnt) - cnt, cnt)
    t = np.arange(len(rep), dtype=np.int64) - first
    A, B = a[rep], b[rep]
    C = c0[rep] + t * m[rep]
    D = (n + B * C) // A
    return A, B, C, D


CACHED_BELOW = 2048  # sets for p below this are kept (a few MB); larger ones are rebuilt


def cremona_prime(p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cremona's set for the odd prime p (``_cremona_prime``), cached for p < 2048 only:
    a CM proof can ask for every prime up to a Sturm bound of 10⁵, whose sets would not
    fit in memory together, and the numpy construction is cheap to repeat."""
    return _cremona_cached(p) if p < CACHED_BELOW else _cremona_prime(p)


@cache
def _cremona_cached(p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    return _cremona_prime(p)


def _cremona_prime(p: int, ordered: bool = True
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Heilbronn matrices of determinant p for an odd prime p from continued fractions.

    [Cr] §2.4: [[1, 0], [0, p]] together with, for every r with |r| < p/2, the
    matrices [[x_i, x_{i+1}], [y_i, y_{i+1}]] met while expanding −p/r by the
    nearest-integer continued fraction (x_0 = p, x_1 = −r, y_0 = 0, y_1 = 1,
    x_{i+1} = q_i x_i − x_{i−1}, the same for y).  Every step keeps the
    determinant p.  About (12 log 2/π²)·p·log p matrices, a third of X_p, and
    T_p is the same sum as with Merel's set (checked in tests/test_heilbronn.py).
    Ties in the rounding go to the even integer (exact integer arithmetic).
    """
    if p < 3 or p % 2 == 0:
        raise ValueError(f"cremona_prime needs an odd prime, got {p}")
    # every r at once, one continued-fraction step per round (numpy), then the matrices
    # put back in the order of the sequential expansion: by r, then by step
    r = np.arange(-(p // 2), p // 2 + 1, dtype=np.int64)
    idx = np.arange(len(r), dtype=np.int64)
    x1, x2 = np.full(len(r), p, dtype=np.int64), -r
    y1, y2 = np.zeros(len(r), dtype=np.int64), np.ones(len(r), dtype=np.int64)
    a, b = np.full(len(r), -p, dtype=np.int64), r.copy()
    parts = [(idx, 0, x1, x2, y1, y2)]
    step = 0
    while len(idx):
        live = b != 0
        idx, x1, x2, y1, y2, a, b = (z[live] for z in (idx, x1, x2, y1, y2, a, b))
        if not len(idx):
            break
        q = _nearest_vec(a, b)
        a, b = -b, a - b * q
        x1, x2 = x2, q * x2 - x1
        y1, y2 = y2, q * y2 - y1
        step += 1
        parts.append((idx, step, x1, x2, y1, y2))
    cols = [np.concatenate([np.array([v], dtype=np.int64)] + [part[2 + c] for part in parts])
            for c, v in enumerate((1, 0, 0, p))]
    if not ordered:  # a sum over the set does not care (``heilbronn_matrices_any_order``)
        return cols[0], cols[1], cols[2], cols[3]
    key = np.concatenate([i * (step + 1) + t for i, t, *_ in parts])
    order = np.concatenate([[0], np.argsort(key, kind="stable") + 1])
    return cols[0][order], cols[1][order], cols[2][order], cols[3][order]


def heilbronn_matrices_any_order(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                  np.ndarray]:
    """The set of ``hecke_matrices`` (n) in some order: for the large primes of a CM
    proof, built without sorting into the order of the sequential expansion."""
    from builder.arith import is_prime

    if n > 2 and n % 2 and n >= CACHED_BELOW and is_prime(n):
        return _cremona_prime(n, ordered=False)
    return hecke_matrices(n)


def heilbronn_points(n: int, u: int, v: int, N: int) -> tuple[np.ndarray, np.ndarray]:
    """(u·a + v·c, u·b + v·d) mod N for every matrix [[a, b], [c, d]] of the Heilbronn set
    of T_n (``hecke_matrices``), in some order: all that a weight-2 Heilbronn sum on the
    Manin symbol (u : v) needs.  For an odd prime n the continued fractions of
    ``_cremona_prime`` run directly on z = u·x + v·y (the same linear recurrence), so no
    matrix is built — the sets of the large primes of a CM proof are never stored."""
    from builder.arith import is_prime

    if not (n > 2 and n % 2 and is_prime(n)) or n < CACHED_BELOW:
        a, b, c, d = hecke_matrices(n)
        return np.mod(u * a + v * c, N), np.mod(u * b + v * d, N)
    p = n
    r = np.arange(-(p // 2), p // 2 + 1, dtype=np.int64)
    z1, z2 = np.full(len(r), u * p % N, dtype=np.int64), np.mod(v - u * r, N)
    a, b = np.full(len(r), -p, dtype=np.int64), r.copy()
    cs, ds = [np.array([u % N], dtype=np.int64), z1], [np.array([v * p % N], dtype=np.int64), z2]
    while len(a):
        live = b != 0
        a, b, z1, z2 = a[live], b[live], z1[live], z2[live]
        if not len(a):
            break
        q = _nearest_vec(a, b)
        a, b = -b, a - b * q
        z1, z2 = z2, np.mod(q * z2 - z1, N)
        cs.append(z1)
        ds.append(z2)
    return np.concatenate(cs), np.concatenate(ds)


def _nearest_vec(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``_nearest`` elementwise (b ≠ 0)."""
    neg = b < 0
    a, b = np.where(neg, -a, a), np.where(neg, -b, b)
    q, r = np.floor_divide(a, b), np.mod(a, b)
    return q + ((2 * r > b) | ((2 * r == b) & (q % 2 == 1)))


def hecke_matrices(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The Heilbronn set used for T_n: Cremona's for odd primes, Merel's otherwise."""
    from builder.arith import is_prime

    if n > 2 and n % 2 and is_prime(n):
        return cremona_prime(n)
    return merel(n)


def _nearest(a: int, b: int) -> int:
    """The integer nearest to a/b (b ≠ 0), ties to the even one."""
    if b < 0:
        a, b = -a, -b
    q, r = divmod(a, b)
    if 2 * r > b or (2 * r == b and q % 2):
        q += 1
    return q
