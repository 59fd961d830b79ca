"""Small integer arithmetic shared by the math core, and argument checks.

Everything here is elementary number theory (factorisation by trial division
is enough for levels and Hecke indices of the sizes we tabulate).
"""

from __future__ import annotations

from functools import lru_cache
from math import gcd, isqrt
from numbers import Integral


def _check_int(value: object, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral):
        raise ValueError(f"{name} must be an integer, got {value!r}")
    return int(value)


def check_level(N: object) -> int:
    """Validate a level N ≥ 1; raises ValueError naming the argument."""
    N = _check_int(N, "level N")
    if N <= 0:
        raise ValueError(f"level N must be ≥ 1, got {N}")
    return N


def check_weight(k: object) -> int:
    """Validate a weight k ≥ 2."""
    k = _check_int(k, "weight k")
    if k < 2:
        raise ValueError(f"weight k must be ≥ 2, got {k}")
    return k


def check_sign(sign: object) -> int:
    """Validate a star-involution sign in {-1, 0, 1}."""
    sign = _check_int(sign, "sign")
    if sign not in (-1, 0, 1):
        raise ValueError(f"sign must be -1, 0 or 1, got {sign}")
    return sign


def check_index(n: object, name: str = "n") -> int:
    """Validate a Hecke index n ≥ 1."""
    n = _check_int(n, name)
    if n <= 0:
        raise ValueError(f"{name} must be ≥ 1, got {n}")
    return n


@lru_cache(maxsize=4096)
def factor(n: int) -> tuple[tuple[int, int], ...]:
    """Prime factorisation of n ≥ 1 as ((p, e), ...), p increasing."""
    out = []
    m = n
    p = 2
    while p * p <= m:
        if m % p == 0:
            e = 0
            while m % p == 0:
                m //= p
                e += 1
            out.append((p, e))
        p += 1 if p == 2 else 2
    if m > 1:
        out.append((m, 1))
    return tuple(out)


def prime_divisors(n: int) -> list[int]:
    return [p for p, _ in factor(n)]


@lru_cache(maxsize=4096)
def divisors(n: int) -> tuple[int, ...]:
    """All positive divisors of n, increasing."""
    ds = [1]
    for p, e in factor(n):
        ds = [d * p**i for d in ds for i in range(e + 1)]
    return tuple(sorted(ds))


def psi(N: int) -> int:
    """Index of Γ0(N) in SL2(Z): N ∏_{p|N} (1 + 1/p)."""
    out = N
    for p, _ in factor(N):
        out = out // p * (p + 1)
    return out


def euler_phi(n: int) -> int:
    out = n
    for p, _ in factor(n):
        out = out // p * (p - 1)
    return out


def moebius(n: int) -> int:
    """μ(n) (n ≥ 1)."""
    out = 1
    for _, e in factor(n):
        if e > 1:
            return 0
        out = -out
    return out


def is_prime(n: int) -> bool:
    if n < 2:
        return False
    return factor(n) == ((n, 1),)


def primes_up_to(B: int) -> list[int]:
    """Primes p ≤ B by the sieve of Eratosthenes."""
    if B < 2:
        return []
    sieve = bytearray([1]) * (B + 1)
    sieve[0:2] = b"\x00\x00"
    for p in range(2, isqrt(B) + 1):
        if sieve[p]:
            sieve[p * p :: p] = bytearray(len(sieve[p * p :: p]))
    return [i for i in range(B + 1) if sieve[i]]


def iter_primes(limit: int):
    """The primes p ≤ limit in increasing order, sieved lazily in doubling segments."""
    lo, hi = 2, 1024
    while lo <= limit:
        hi = min(hi, limit)
        for p in primes_up_to(hi):
            if p >= lo:
                yield p
        lo, hi = hi + 1, 2 * hi


def next_prime(n: int) -> int:
    """Smallest prime > n."""
    m = n + 1
    while not is_prime(m):
        m += 1
    return m


def exact_divisors(N: int) -> list[int]:
    """The exact prime-power divisors Q ∥ N (Q = p^e with p^e ∥ N), increasing."""
    return sorted(p**e for p, e in factor(N))


def coprime(a: int, b: int) -> bool:
    return gcd(a, b) == 1


def sturm_bound(N: int, k: int) -> int:
    """Sturm's bound ⌊k ψ(N) / 12⌋ for Γ0(N) [Su]."""
    return k * psi(N) // 12


def is_prime_large(n: int) -> bool:
    """Deterministic Miller–Rabin for n < 3.3·10^24 (bases = first 13 primes)."""
    if n < 2:
        return False
    small = (2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41)
    for p in small:
        if n % p == 0:
            return n == p
    d, s = n - 1, 0
    while d % 2 == 0:
        d //= 2
        s += 1
    for a in small:
        x = pow(a, d, n)
        if x in (1, n - 1):
            continue
        for _ in range(s - 1):
            x = x * x % n
            if x == n - 1:
                break
        else:
            return False
    return True
