"""Closed formulas for Γ0(N): dimensions and the Eichler–Selberg trace formula.

Written from the published statements, independently of the engine (nothing here
imports builder.symbols, builder.forms or builder.arith), so that `nfb verify`
can re-check a stored table against mathematics that was not used to build it.

Sources
-------
[DS]  F. Diamond, J. Shurman, *A First Course in Modular Forms*, GTM 228:
      Thm 3.1.1 (genus of X0(N)), Cor 3.7.2/Cor 3.9.1 (ν2, ν3, ν∞ for Γ0(N)),
      Thm 3.5.1 / Fig. 3.4 (dim M_k and dim S_k for even k).
[Mt]  G. Martin, *Dimensions of the spaces of cusp forms and newforms on Γ0(N)
      and Γ1(N)*, J. Number Theory 112 (2005): Thm 1 (dim S_k^new(Γ0(N)) as a
      combination of the multiplicative functions s0#, ν∞#, ν2#, ν3#), and the
      relation dim S_k^new(N) = Σ_{M|N} β(N/M) dim S_k(M), β(p) = −2,
      β(p²) = 1, β(p^r) = 0 (r ≥ 3).
[CS]  H. Cohen, F. Strömberg, *Modular Forms: A Classical Approach*, GSM 179,
      Thm 12.4.11 (Eichler–Selberg trace formula on S_k(Γ0(N), χ)), here with
      χ trivial and gcd(n, N) = 1.
[Co]  H. Cohen, *A Course in Computational Algebraic Number Theory*, GTM 138,
      §5.3: reduced binary quadratic forms (Def. 5.3.2, Alg. 5.3.5), class
      numbers h(D), and the Hurwitz class number (Def. 5.3.6).

All functions take plain ints and return exact ints or ``Fraction``s.
"""

from __future__ import annotations

from fractions import Fraction
from functools import lru_cache
from math import gcd, isqrt

# ----------------------------------------------------------------------------- arithmetic


@lru_cache(maxsize=65536)
def factorize(n: int) -> tuple[tuple[int, int], ...]:
    """((p, e), …) with p increasing, by trial division (n ≥ 1)."""
    if n < 1:
        raise ValueError(f"factorize needs n ≥ 1, got {n}")
    out = []
    p = 2
    while p * p <= n:
        if n % p == 0:
            e = 0
            while n % p == 0:
                n //= p
                e += 1
            out.append((p, e))
        p += 1 if p == 2 else 2
    if n > 1:
        out.append((n, 1))
    return tuple(out)


def divisors(n: int) -> list[int]:
    ds = [1]
    for p, e in factorize(n):
        ds = [d * p**i for d in ds for i in range(e + 1)]
    return sorted(ds)


def sigma0(n: int) -> int:
    """Number of divisors of n."""
    out = 1
    for _, e in factorize(n):
        out *= e + 1
    return out


def sigma1(n: int) -> int:
    """Sum of the divisors of n."""
    out = 1
    for p, e in factorize(n):
        out *= (p ** (e + 1) - 1) // (p - 1)
    return out


def euler_phi(n: int) -> int:
    out = n
    for p, _ in factorize(n):
        out = out // p * (p - 1)
    return out


def moebius(n: int) -> int:
    f = factorize(n)
    if any(e > 1 for _, e in f):
        return 0
    return -1 if len(f) % 2 else 1


def is_prime(n: int) -> bool:
    return n >= 2 and factorize(n) == ((n, 1),)


def primes_up_to(B: int) -> list[int]:
    if B < 2:
        return []
    sieve = bytearray([1]) * (B + 1)
    sieve[0] = sieve[1] = 0
    for i in range(2, isqrt(B) + 1):
        if sieve[i]:
            sieve[i * i :: i] = bytearray(len(range(i * i, B + 1, i)))
    return [i for i in range(B + 1) if sieve[i]]


def kronecker_minus4(p: int) -> int:
    """(−4/p) for a prime p: 0 for p = 2, +1 for p ≡ 1 (mod 4), −1 for p ≡ 3 (mod 4)."""
    return 0 if p == 2 else (1 if p % 4 == 1 else -1)


def kronecker_minus3(p: int) -> int:
    """(−3/p) for a prime p: 0 for p = 3, +1 for p ≡ 1 (mod 3), −1 for p ≡ 2 (mod 3)."""
    return 0 if p == 3 else (1 if p % 3 == 1 else -1)


# ----------------------------------------------------------------------------- Γ0(N) invariants


def psi(N: int) -> int:
    """Index [SL2(Z) : Γ0(N)] = N ∏_{p|N} (1 + 1/p)  ([DS] §3.9)."""
    out = N
    for p, _ in factorize(N):
        out = out // p * (p + 1)
    return out


def nu2(N: int) -> int:
    """Elliptic points of period 2 of Γ0(N): 0 if 4 | N, else ∏_{p|N} (1 + (−4/p)) [DS 3.9.1]."""
    if N % 4 == 0:
        return 0
    out = 1
    for p, _ in factorize(N):
        out *= 1 + kronecker_minus4(p)
    return out


def nu3(N: int) -> int:
    """Elliptic points of period 3 of Γ0(N): 0 if 9 | N, else ∏_{p|N} (1 + (−3/p)) [DS 3.9.1]."""
    if N % 9 == 0:
        return 0
    out = 1
    for p, _ in factorize(N):
        out *= 1 + kronecker_minus3(p)
    return out


def nu_inf(N: int) -> int:
    """Cusps of Γ0(N): Σ_{d|N} φ(gcd(d, N/d))  ([DS] Fig. 3.3 / §3.8)."""
    return sum(euler_phi(gcd(d, N // d)) for d in divisors(N))


def genus(N: int) -> int:
    """Genus of X0(N): 1 + ψ/12 − ν2/4 − ν3/3 − ν∞/2  ([DS] Thm 3.1.1)."""
    g = 1 + Fraction(psi(N), 12) - Fraction(nu2(N), 4) - Fraction(nu3(N), 3)
    g -= Fraction(nu_inf(N), 2)
    assert g.denominator == 1, (N, g)
    return int(g)


def _check(N: int, k: int) -> None:
    if N < 1:
        raise ValueError(f"level N must be ≥ 1, got {N}")
    if k < 0:
        raise ValueError(f"weight k must be ≥ 0, got {k}")


def dim_cusp(N: int, k: int) -> int:
    """dim S_k(Γ0(N))  ([DS] Thm 3.5.1 with Fig. 3.4).

    k = 2: the genus; even k ≥ 4: (k−1)(g−1) + (k/2 − 1)ν∞ + ⌊k/4⌋ν2 + ⌊k/3⌋ν3;
    odd k or k = 0: 0 (−I ∈ Γ0(N) kills odd weights).
    """
    _check(N, k)
    if k % 2 or k == 0:
        return 0
    g = genus(N)
    if k == 2:
        return g
    return (k - 1) * (g - 1) + (k // 2 - 1) * nu_inf(N) + (k // 4) * nu2(N) + (k // 3) * nu3(N)


def dim_modular(N: int, k: int) -> int:
    """dim M_k(Γ0(N))  ([DS] Thm 3.5.1): k = 0: 1; k = 2: g + ν∞ − 1;
    even k ≥ 4: (k−1)(g−1) + (k/2)ν∞ + ⌊k/4⌋ν2 + ⌊k/3⌋ν3."""
    _check(N, k)
    if k % 2:
        return 0
    if k == 0:
        return 1
    g = genus(N)
    if k == 2:
        return g + nu_inf(N) - 1
    return (k - 1) * (g - 1) + (k // 2) * nu_inf(N) + (k // 4) * nu2(N) + (k // 3) * nu3(N)


def dim_eisenstein(N: int, k: int) -> int:
    """dim E_k(Γ0(N)) = dim M_k − dim S_k: ν∞ for even k ≥ 4, ν∞ − 1 for k = 2."""
    _check(N, k)
    if k % 2 or k == 0:
        return 0
    return nu_inf(N) - 1 if k == 2 else nu_inf(N)


def _beta(n: int) -> int:
    """β of [Mt]: multiplicative, β(p) = −2, β(p²) = 1, β(p^r) = 0 for r ≥ 3."""
    out = 1
    for _, e in factorize(n):
        out *= {1: -2, 2: 1}.get(e, 0)
    return out


def dim_new_by_divisors(N: int, k: int) -> int:
    """dim S_k^new(Γ0(N)) = Σ_{M|N} β(N/M) dim S_k(Γ0(M))  ([Mt], the defining convolution)."""
    return sum(_beta(N // M) * dim_cusp(M, k) for M in divisors(N))


def _mult(N: int, local) -> int:
    out = 1
    for p, r in factorize(N):
        out *= local(p, r)
    return out


def _s0_sharp(p: int, r: int) -> int:
    if r == 1:
        return p - 1
    if r == 2:
        return p * p - p - 1
    return (p - 1) ** 2 * (p + 1) * p ** (r - 3)


def _nu_inf_sharp(p: int, r: int) -> int:
    if r % 2:
        return 0
    if r == 2:
        return p - 2
    return (p - 1) ** 2 * p ** (r // 2 - 2)


def _nu2_sharp(p: int, r: int) -> int:
    if p == 2:
        return {1: -1, 2: -1, 3: 1}.get(r, 0)
    chi = kronecker_minus4(p)
    return {1: chi - 1, 2: -chi}.get(r, 0)


def _nu3_sharp(p: int, r: int) -> int:
    if p == 3:
        return {1: -1, 2: -1, 3: 1}.get(r, 0)
    chi = kronecker_minus3(p)
    return {1: chi - 1, 2: -chi}.get(r, 0)


def dim_new(N: int, k: int) -> int:
    """dim S_k^new(Γ0(N)) by the closed formula of [Mt] Thm 1 (even k ≥ 2):

        (k−1)/12 · s0#(N) − ν∞#(N)/2 + c2(k)·ν2#(N) + c3(k)·ν3#(N) + [k = 2]·μ(N),

    c2(k) = 1/4 + ⌊k/4⌋ − k/4, c3(k) = 1/3 + ⌊k/3⌋ − k/3, and s0#, ν∞#, ν2#, ν3#
    the multiplicative functions of [Mt] (the β-convolutions of ψ, ν∞, ν2, ν3).
    """
    _check(N, k)
    if k % 2 or k == 0:
        return 0
    c2 = Fraction(1, 4) + k // 4 - Fraction(k, 4)
    c3 = Fraction(1, 3) + k // 3 - Fraction(k, 3)
    d = Fraction(k - 1, 12) * _mult(N, _s0_sharp) - Fraction(_mult(N, _nu_inf_sharp), 2)
    d += c2 * _mult(N, _nu2_sharp) + c3 * _mult(N, _nu3_sharp)
    if k == 2:
        d += moebius(N)
    assert d.denominator == 1, (N, k, d)
    return int(d)


def sturm_bound(N: int, k: int) -> int:
    """⌊k·ψ(N)/12⌋ (Sturm, LNM 1240)."""
    return k * psi(N) // 12


# ----------------------------------------------------------------------------- class numbers


@lru_cache(maxsize=65536)
def class_number(D: int) -> int:
    """h(D): classes of primitive positive definite forms of discriminant D < 0 ([Co] Alg 5.3.5).

    Counts reduced forms (a, b, c), b² − 4ac = D, |b| ≤ a ≤ c, b ≥ 0 when |b| = a
    or a = c, gcd(a, b, c) = 1.
    """
    if D >= 0 or D % 4 not in (0, 1):
        raise ValueError(f"not a negative discriminant: {D}")
    h = 0
    b = D % 2
    bmax = isqrt(-D // 3)
    while b <= bmax:
        q = (b * b - D) // 4
        a = max(b, 1)
        while a * a <= q:
            if q % a == 0:
                c = q // a
                if gcd(gcd(a, b), c) == 1:
                    h += 1 if (b == 0 or a == b or a == c) else 2
            a += 1
        b += 2
    return h


def class_number_weighted(D: int) -> Fraction:
    """h_w(D) = h(D) / (w(D)/2) with w(−3) = 6, w(−4) = 4, w = 2 otherwise."""
    w = {-3: 6, -4: 4}.get(D, 2)
    return Fraction(2 * class_number(D), w)


def hurwitz(n: int) -> Fraction:
    """Hurwitz class number H(n) = Σ_{f² | n, −n/f² ≡ 0,1 (4)} h_w(−n/f²), n ≥ 1 ([Co] 5.3.6)."""
    if n <= 0:
        raise ValueError(f"hurwitz needs n ≥ 1, got {n}")
    total = Fraction(0)
    f = 1
    while f * f <= n:
        if n % (f * f) == 0 and (-n // (f * f)) % 4 in (0, 1):
            total += class_number_weighted(-n // (f * f))
        f += 1
    return total


# ----------------------------------------------------------------------------- trace formula


def _lucas(t: int, n: int, m: int) -> int:
    """(ρ^m − ρ̄^m)/(ρ − ρ̄) for the roots ρ, ρ̄ of X² − tX + n (u_0 = 0, u_1 = 1)."""
    u0, u1 = 0, 1
    if m == 0:
        return 0
    for _ in range(m - 1):
        u0, u1 = u1, t * u1 - n * u0
    return u1


def _root_count(t: int, n: int, N: int, modulus: int) -> int:
    """#{x mod N : x² − t x + n ≡ 0 (mod modulus)} (modulus a multiple of N)."""
    return sum(1 for x in range(N) if (x * x - t * x + n) % modulus == 0)


def trace_hecke(N: int, k: int, n: int) -> int:
    """Tr T_n on S_k(Γ0(N)) for even k ≥ 2 and gcd(n, N) = 1 ([CS] Thm 12.4.11, χ trivial).

    Tr T_n = A1 + A2 + A3 + A4 with
      A1 = n^(k/2−1) (k−1)/12 ψ(N)                       if n is a square, else 0;
      A2 = −½ Σ_{t² < 4n} P_k(t, n) Σ_f h_w((t²−4n)/f²) μ(t, f, n),
           P_k(t, n) = (ρ^(k−1) − ρ̄^(k−1))/(ρ − ρ̄), ρ + ρ̄ = t, ρρ̄ = n;
           f over f ≥ 1 with f² | t²−4n and (t²−4n)/f² ≡ 0, 1 (mod 4);
           μ(t, f, n) = ψ(N)/ψ(N/N_f) · #{x mod N : x² − tx + n ≡ 0 (mod N·N_f)},
           N_f = gcd(N, f);
      A3 = −½ Σ_{d | n} min(d, n/d)^(k−1) Σ_{τ | N, g = gcd(τ, N/τ), g | n/d − d} φ(g);
      A4 = Σ_{t | n, gcd(N, n/t) = 1} t                   if k = 2, else 0.
    """
    if N < 1 or n < 1:
        raise ValueError(f"need N ≥ 1 and n ≥ 1, got N={N}, n={n}")
    if k % 2 or k < 2:
        return 0
    if gcd(n, N) != 1:
        raise ValueError(f"trace_hecke needs gcd(n, N) = 1, got n={n}, N={N}")
    psiN = psi(N)
    total = Fraction(0)
    r = isqrt(n)
    if r * r == n:  # A1
        total += Fraction(k - 1, 12) * psiN * r ** (k - 2)
    a2 = Fraction(0)  # A2
    t = 0
    while t * t < 4 * n:
        for tt in {t, -t}:
            D = tt * tt - 4 * n
            inner = Fraction(0)
            f = 1
            while f * f <= -D:
                if D % (f * f) == 0 and (D // (f * f)) % 4 in (0, 1):
                    Nf = gcd(N, f)
                    mu = Fraction(psiN, psi(N // Nf)) * _root_count(tt, n, N, N * Nf)
                    if mu:
                        inner += class_number_weighted(D // (f * f)) * mu
                f += 1
            a2 += _lucas(tt, n, k - 1) * inner
        t += 1
    total -= a2 / 2
    a3 = 0  # A3
    for d in divisors(n):
        e = n // d
        s = 0
        for tau in divisors(N):
            g = gcd(tau, N // tau)
            if (e - d) % g == 0:
                s += euler_phi(g)
        a3 += min(d, e) ** (k - 1) * s
    total -= Fraction(a3, 2)
    if k == 2:  # A4
        total += sum(t for t in divisors(n) if gcd(N, n // t) == 1)
    if total.denominator != 1:
        raise ArithmeticError(f"trace formula gave a non-integer {total} for N={N} k={k} n={n}")
    return int(total)


def deligne_trace_ok(trace: int, dim: int, n: int, k: int) -> bool:
    """|Tr a_n| ≤ dim·σ0(n)·n^((k−1)/2) (Deligne), decided exactly by squaring."""
    return trace * trace <= dim * dim * sigma0(n) ** 2 * n ** (k - 1)
