"""Merel's Heilbronn matrices of determinant n.

X_n = { [[a, b], [c, d]] : ad − bc = n,  a > b ≥ 0,  d > c ≥ 0 }.

Merel's theorem ([Me] §2, [St] Thm 8.?? "Merel's formula"): on Manin symbols
of any weight for Γ0(N),

    T_n [P, (u:v)] = Σ_{h ∈ X_n, (u:v)h ∈ P¹(Z/NZ)} [P|h, (u:v)h],

for every n ≥ 1, including n not prime to N (then T_n is the U-operator at
the primes dividing N).

Enumeration (ours): for each a ≥ 1 and 0 ≤ b < a the condition d > c is
c(a − b) < n, and a | n + bc fixes c modulo a/gcd(a, b); the candidates are
laid out with numpy so that n in the thousands costs milliseconds.
"""

from __future__ import annotations

from functools import lru_cache

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
