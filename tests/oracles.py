"""Independent statements of published formulas, used as oracles by the tests.

Nothing here imports from ``builder``: a mistake in the engine (or in
``builder.checks``) cannot hide behind a shared helper.  Everything is exact
integer / ``Fraction`` arithmetic, written directly from the cited statements.

Sources
-------
[DS]  F. Diamond, J. Shurman, *A First Course in Modular Forms*, GTM 228, Springer 2005:
      §3.1 (genus of X0(N): Fig. 3.3 / Thm 3.1.1, ε2, ε3, ε∞ of Cor. 3.7.2 and §3.8),
      §3.5 (Thm 3.5.1, dimensions of M_k and S_k for even k, Fig. 3.4).
[Mt]  G. Martin, *Dimensions of the spaces of cusp forms and newforms on Γ0(N) and Γ1(N)*,
      J. Number Theory 112 (2005) 298–331, the function β and formula for dim S_k^new.
[Co]  H. Cohen, *A Course in Computational Algebraic Number Theory*, GTM 138, §5.3
      (reduced binary quadratic forms, Algorithm 5.3.5; Hurwitz class numbers, Def. 5.3.6).
[CS]  H. Cohen, F. Strömberg, *Modular Forms: A Classical Approach*, AMS GSM 179 (2017),
      Thm 12.4.11 (Eichler–Selberg trace formula on S_k(Γ0(N), χ)); the same statement is in
      H. Cohen, *Trace des opérateurs de Hecke sur Γ0(N)*, Sém. Théorie des Nombres de Bordeaux
      1976–77, exposé 4.
[Cr]  J. E. Cremona, *Algorithms for Modular Elliptic Curves*, 2nd ed., CUP 1997, Prop. 2.2.3
      (equivalence of cusps of Γ0(N)).
[MO]  Y. Martin, K. Ono, *Eta-quotients and elliptic curves*, Proc. AMS 125 (1997) (the weight-2
      eta products of levels 11, 14, 15, 20, 24, 27, 32, 36); D. Dummit, H. Kisilevsky,
      J. McKay, *Multiplicative products of η-functions*, Contemp. Math. 45 (1985) (the
      products η(z)^a η(Mz)^a, a = 24/(M+1), and the other multiplicative eta products used).
OEIS  A000594 (Ramanujan τ).

The trace formula below was WRITTEN FROM MEMORY of the statement in [CS] Thm 12.4.11 / Cohen
(1977), specialised to trivial character and gcd(n, N) = 1; it is validated in
tests/test_oracles.py against data that do not come from the engine (τ(n), eta products,
elliptic-curve point counts, and the dimension formula at n = 1).
"""

from __future__ import annotations

from fractions import Fraction
from functools import cache
from math import comb, gcd, isqrt

# ----------------------------------------------------------------------------------------------
# elementary arithmetic (own copies, deliberately not shared with builder.arith)
# ----------------------------------------------------------------------------------------------


def factorize(n: int) -> dict[int, int]:
    """Prime factorisation {p: e} of n ≥ 1 by trial division."""
    out: dict[int, int] = {}
    p = 2
    while p * p <= n:
        while n % p == 0:
            out[p] = out.get(p, 0) + 1
            n //= p
        p += 1
    if n > 1:
        out[n] = out.get(n, 0) + 1
    return out


def divisors(n: int) -> list[int]:
    """Positive divisors of n ≥ 1, increasing."""
    return [d for d in range(1, n + 1) if n % d == 0] if n < 64 else _divisors_fast(n)


def _divisors_fast(n: int) -> list[int]:
    small = [d for d in range(1, isqrt(n) + 1) if n % d == 0]
    return sorted(set(small + [n // d for d in small]))


def phi(n: int) -> int:
    """Euler's totient."""
    out = n
    for p in factorize(n):
        out = out // p * (p - 1)
    return out


def primes_below(B: int) -> list[int]:
    """Primes p < B."""
    return [p for p in range(2, B) if all(p % q for q in range(2, isqrt(p) + 1))]


def is_square(n: int) -> bool:
    return n >= 0 and isqrt(n) ** 2 == n


def psi(N: int) -> int:
    """ψ(N) = [SL2(Z) : Γ0(N)] = N ∏_{p|N} (1 + 1/p)  ([DS] §3.9, Exercise 1.2.3)."""
    out = N
    for p in factorize(N):
        out = out // p * (p + 1)
    return out


def sigma(n: int, r: int = 1) -> int:
    return sum(d**r for d in divisors(n))


# ----------------------------------------------------------------------------------------------
# [DS] ch. 3: elliptic points, cusps, genus, dimensions
# ----------------------------------------------------------------------------------------------


def _kron_m1(p: int) -> int:
    """(−1/p) as in [DS] Cor. 3.7.2: 0 for p = 2, ±1 for p ≡ ±1 mod 4."""
    return 0 if p == 2 else (1 if p % 4 == 1 else -1)


def _kron_m3(p: int) -> int:
    """(−3/p) as in [DS] Cor. 3.7.2: 0 for p = 3, 1 for p ≡ 1 mod 3, −1 for p ≡ 2 mod 3."""
    return 0 if p == 3 else (1 if p % 3 == 1 else -1)


def nu2(N: int) -> int:
    """Number of elliptic points of period 2 of Γ0(N) ([DS] Cor. 3.7.2)."""
    if N % 4 == 0:
        return 0
    out = 1
    for p in factorize(N):
        out *= 1 + _kron_m1(p)
    return out


def nu3(N: int) -> int:
    """Number of elliptic points of period 3 of Γ0(N) ([DS] Cor. 3.7.2)."""
    if N % 9 == 0:
        return 0
    out = 1
    for p in factorize(N):
        out *= 1 + _kron_m3(p)
    return out


def nu_inf(N: int) -> int:
    """Number of cusps of Γ0(N): Σ_{d|N} φ(gcd(d, N/d))  ([DS] §3.8, Fig. 3.3)."""
    return sum(phi(gcd(d, N // d)) for d in divisors(N))


def genus(N: int) -> int:
    """Genus of X0(N): 1 + ψ/12 − ν2/4 − ν3/3 − ν∞/2  ([DS] Thm 3.1.1, Fig. 3.3)."""
    g = 1 + Fraction(psi(N), 12) - Fraction(nu2(N), 4) - Fraction(nu3(N), 3)
    g -= Fraction(nu_inf(N), 2)
    assert g.denominator == 1
    return int(g)


def dim_cusp(N: int, k: int) -> int:
    """dim S_k(Γ0(N)) for even k ≥ 2 ([DS] Thm 3.5.1, Fig. 3.4); 0 for odd k (−1 ∈ Γ0(N)).

    k = 2: the genus g.  k ≥ 4 even:
        (k − 1)(g − 1) + ⌊k/4⌋ ε2 + ⌊k/3⌋ ε3 + (k/2 − 1) ε∞.
    """
    if k % 2:
        return 0
    g = genus(N)
    if k == 2:
        return g
    return (k - 1) * (g - 1) + (k // 4) * nu2(N) + (k // 3) * nu3(N) + (k // 2 - 1) * nu_inf(N)


def dim_modular(N: int, k: int) -> int:
    """dim M_k(Γ0(N)) for even k ≥ 2 ([DS] Thm 3.5.1, Fig. 3.4); 0 for odd k.

    k = 2: g + ε∞ − 1.  k ≥ 4 even: (k − 1)(g − 1) + ⌊k/4⌋ ε2 + ⌊k/3⌋ ε3 + (k/2) ε∞.
    """
    if k % 2:
        return 0
    g = genus(N)
    if k == 2:
        return g + nu_inf(N) - 1
    return (k - 1) * (g - 1) + (k // 4) * nu2(N) + (k // 3) * nu3(N) + (k // 2) * nu_inf(N)


def dim_eisenstein(N: int, k: int) -> int:
    """dim E_k(Γ0(N)) = dim M_k − dim S_k: ε∞ for even k ≥ 4, ε∞ − 1 for k = 2 ([DS] §3.5)."""
    return dim_modular(N, k) - dim_cusp(N, k)


def martin_beta(n: int) -> int:
    """Martin's β: multiplicative, β(p) = −2, β(p²) = 1, β(p^r) = 0 for r ≥ 3 ([Mt] §1)."""
    out = 1
    for _p, e in factorize(n).items():
        out *= {1: -2, 2: 1}.get(e, 0)
    return out


def dim_new(N: int, k: int) -> int:
    """dim S_k^new(Γ0(N)) = Σ_{M|N} β(N/M) dim S_k(Γ0(M))  ([Mt] Thm 1 / eq. (1))."""
    return sum(martin_beta(N // M) * dim_cusp(M, k) for M in divisors(N))


# ----------------------------------------------------------------------------------------------
# [Co] §5.3: reduced forms and class numbers
# ----------------------------------------------------------------------------------------------


def reduced_forms(D: int, primitive: bool = True) -> list[tuple[int, int, int]]:
    """Reduced positive definite forms (a, b, c), b² − 4ac = D < 0 ([Co] Def. 5.3.2, Alg. 5.3.5).

    Reduced: |b| ≤ a ≤ c, and b ≥ 0 whenever |b| = a or a = c.  With ``primitive`` only
    forms with gcd(a, b, c) = 1.
    """
    assert D < 0 and D % 4 in (0, 1)
    out = []
    a = 1
    while 3 * a * a <= -D:  # a ≤ sqrt(|D|/3)
        for b in range(-a + 1, a + 1):
            if (b * b - D) % (4 * a):
                continue
            c = (b * b - D) // (4 * a)
            if c < a or (c == a and b < 0):
                continue
            if primitive and gcd(gcd(a, b), c) != 1:
                continue
            out.append((a, b, c))
        a += 1
    return out


def _form_weight(form: tuple[int, int, int]) -> Fraction:
    """1/2 for multiples of x² + y², 1/3 for multiples of x² + xy + y², else 1 ([Co] §5.3.2)."""
    a, b, c = form
    if b == 0 and a == c:
        return Fraction(1, 2)
    if a == b == c:
        return Fraction(1, 3)
    return Fraction(1)


@cache
def class_number_weighted(D: int) -> Fraction:
    """h(D)/(w(D)/2) for a negative discriminant D: primitive reduced forms, weights 1/2, 1/3."""
    return sum((_form_weight(f) for f in reduced_forms(D, primitive=True)), Fraction(0))


@cache
def hurwitz(n: int) -> Fraction:
    """Hurwitz class number H(n) ([Co] Def. 5.3.6; Zagier's normalisation).

    H(0) = −1/12; H(n) = 0 for n ≡ 1, 2 (mod 4); otherwise the number of all (not
    necessarily primitive) reduced forms of discriminant −n, those equivalent to a multiple of
    x² + y² counted 1/2 and of x² + xy + y² counted 1/3.
    """
    if n == 0:
        return Fraction(-1, 12)
    if n < 0 or n % 4 in (1, 2):
        return Fraction(0)
    return sum((_form_weight(f) for f in reduced_forms(-n, primitive=False)), Fraction(0))


# ----------------------------------------------------------------------------------------------
# [CS] Thm 12.4.11: Eichler–Selberg trace formula, trivial character, gcd(n, N) = 1
# ----------------------------------------------------------------------------------------------


def _lucas(t: int, n: int, m: int) -> int:
    """(ρ^m − ρ̄^m)/(ρ − ρ̄) for the roots ρ, ρ̄ of x² − t x + n (u_0 = 0, u_1 = 1)."""
    u0, u1 = 0, 1
    if m == 0:
        return 0
    for _ in range(m - 1):
        u0, u1 = u1, t * u1 - n * u0
    return u1


def _mu(N: int, t: int, f: int, n: int) -> Fraction:
    """μ(t, f, n) = ψ(N)/ψ(N/N_f) · #{x mod N : x² − t x + n ≡ 0 (mod N·N_f)}, N_f = gcd(N, f).

    [CS] Thm 12.4.11 with χ trivial (so the sum of χ(x) is a count).  The congruence
    modulo N·N_f is well defined for x modulo N because N_f² | t² − 4n.
    """
    Nf = gcd(N, f)
    mod = N * Nf
    count = sum(1 for x in range(N) if (x * x - t * x + n) % mod == 0)
    return Fraction(psi(N), psi(N // Nf)) * count


def trace_hecke(n: int, N: int, k: int) -> int:
    """Tr(T_n | S_k(Γ0(N))) for even k ≥ 2, n ≥ 1, gcd(n, N) = 1 — Eichler–Selberg.

    [CS] Thm 12.4.11 (Cohen 1977), χ trivial, written from memory of that statement:

        Tr T_n = A1 + A2 + A3 + A4,
        A1 = n^(k/2 − 1) · (k − 1)/12 · ψ(N)                   if n is a square, else 0;
        A2 = −1/2 Σ_{t ∈ Z, t² < 4n} P_k(t, n) Σ_f h_w((t² − 4n)/f²) · μ(t, f, n),
             P_k(t, n) = (ρ^(k−1) − ρ̄^(k−1))/(ρ − ρ̄), ρ ρ̄ = n, ρ + ρ̄ = t,
             f over f ≥ 1 with f² | t² − 4n and (t² − 4n)/f² ≡ 0, 1 (mod 4),
             h_w(D) = h(D)/(w(D)/2) (weighted class number of discriminant D);
        A3 = −1/2 Σ_{d | n} min(d, n/d)^(k−1) Σ_{τ | N, gcd(τ, N/τ) | n/d − d} φ(gcd(τ, N/τ));
        A4 = Σ_{t | n, gcd(N, n/t) = 1} t  (= σ_1(n) here)      if k = 2, else 0.
    """
    if k % 2 or k < 2 or n < 1 or N < 1 or gcd(n, N) != 1:
        raise ValueError("trace_hecke needs even k ≥ 2, n ≥ 1, N ≥ 1 and gcd(n, N) = 1")
    total = Fraction(0)
    # A1
    if is_square(n):
        total += Fraction((k - 1) * psi(N) * isqrt(n) ** (k - 2), 12)
    # A2
    a2 = Fraction(0)
    r = isqrt(4 * n)
    for t in range(-r, r + 1):
        disc = t * t - 4 * n
        if disc >= 0:
            continue
        inner = Fraction(0)
        for f in range(1, isqrt(-disc) + 1):
            if disc % (f * f):
                continue
            D = disc // (f * f)
            if D % 4 not in (0, 1):
                continue
            inner += class_number_weighted(D) * _mu(N, t, f, n)
        a2 += _lucas(t, n, k - 1) * inner
    total -= a2 / 2
    # A3
    a3 = Fraction(0)
    for d in divisors(n):
        inner = 0
        for tau in divisors(N):
            g = gcd(tau, N // tau)
            if (n // d - d) % g == 0:
                inner += phi(g)
        a3 += min(d, n // d) ** (k - 1) * inner
    total -= a3 / 2
    # A4
    if k == 2:
        total += sum(t for t in divisors(n) if gcd(N, n // t) == 1)
    assert total.denominator == 1, (n, N, k, total)
    return int(total)


# ----------------------------------------------------------------------------------------------
# q-series: eta products and Δ
# ----------------------------------------------------------------------------------------------


def eta_product(factors: dict[int, int], nterms: int) -> list[int]:
    """Coefficients a_1..a_nterms of ∏_m η(m z)^{e_m} = q^s ∏_m ∏_{j≥1} (1 − q^{m j})^{e_m}.

    η(z) = q^(1/24) ∏ (1 − q^j) (Dedekind).  The shift s = Σ m e_m / 24 must be 1 (as for
    the cusp forms used here), so the result is the list [a_1, a_2, …].  Pure integer
    arithmetic: multiply by (1 − q^J) in place, divide by it as a geometric series.
    """
    shift = sum(m * e for m, e in factors.items())
    if shift != 24:
        raise ValueError(f"eta product must start at q^1, got q^({shift}/24)")
    B = nterms - 1  # need the series ∏(...) up to q^(nterms − 1)
    c = [0] * (B + 1)
    c[0] = 1
    for m, e in factors.items():
        for j in range(1, B // m + 1):
            J = m * j
            for _ in range(abs(e)):
                if e > 0:
                    for i in range(B, J - 1, -1):
                        c[i] -= c[i - J]
                else:
                    for i in range(J, B + 1):
                        c[i] += c[i - J]
    return c  # c[i] is the coefficient of q^(i + 1)


def ramanujan_tau(nterms: int) -> list[int]:
    """[τ(1), …, τ(nterms)] from Δ = q ∏ (1 − q^n)^24 (OEIS A000594)."""
    return eta_product({1: 24}, nterms)


def coefficient(series: list[int], n: int) -> int:
    """a_n of a series returned by :func:`eta_product` (1-based)."""
    return series[n - 1]


# ----------------------------------------------------------------------------------------------
# [Cr] Table 1: elliptic curves of small conductor, a_p by counting points
# ----------------------------------------------------------------------------------------------

#: Weierstrass coefficients [a1, a2, a3, a4, a6] of the optimal curves of some isogeny classes,
#: from [Cr] Table 1 (transcribed from memory of that table; each is validated in
#: tests/test_oracles.py by the discriminant having exactly the conductor's primes and by the
#: trace formula on spaces spanned by these curves).
CREMONA_CURVES: dict[str, tuple[int, int, int, int, int]] = {
    "11a1": (0, -1, 1, -10, -20),
    "14a1": (1, 0, 1, 4, -6),
    "15a1": (1, 1, 1, -10, -10),
    "17a1": (1, -1, 1, -1, -14),
    "19a1": (0, 1, 1, -9, -15),
    "20a1": (0, 1, 0, 4, 4),
    "21a1": (1, 0, 0, -4, -1),
    "24a1": (0, -1, 0, -4, 4),
    "26a1": (1, 0, 1, -5, -8),
    "26b1": (1, -1, 1, -3, 3),
    "27a1": (0, 0, 1, 0, -7),
    "30a1": (1, 0, 1, 1, 2),
    "32a1": (0, 0, 0, 4, 0),
    "33a1": (1, 1, 0, -11, 0),
    "36a1": (0, 0, 0, 0, 1),
    "37a1": (0, 0, 1, -1, 0),
    "37b1": (0, 1, 1, -23, -50),
    "49a1": (1, -1, 0, -2, -1),
}


def curve_discriminant(ainv: tuple[int, int, int, int, int]) -> int:
    """Discriminant of y² + a1 xy + a3 y = x³ + a2 x² + a4 x + a6 (Silverman III.1)."""
    a1, a2, a3, a4, a6 = ainv
    b2 = a1 * a1 + 4 * a2
    b4 = 2 * a4 + a1 * a3
    b6 = a3 * a3 + 4 * a6
    b8 = a1 * a1 * a6 + 4 * a2 * a6 - a1 * a3 * a4 + a2 * a3 * a3 - a4 * a4
    return -b2 * b2 * b8 - 8 * b4**3 - 27 * b6 * b6 + 9 * b2 * b4 * b6


def curve_ap(ainv: tuple[int, int, int, int, int], p: int) -> int:
    """a_p = p + 1 − #E(F_p) by counting affine points plus the point at infinity."""
    a1, a2, a3, a4, a6 = ainv
    count = 1
    for x in range(p):
        rhs = (x * x * x + a2 * x * x + a4 * x + a6) % p
        for y in range(p):
            if (y * y + a1 * x * y + a3 * y - rhs) % p == 0:
                count += 1
    return p + 1 - count


# ----------------------------------------------------------------------------------------------
# [Cr] Prop. 2.2.3: equivalence of cusps
# ----------------------------------------------------------------------------------------------


def cusps_equivalent_cremona(N: int, a1: tuple[int, int], a2: tuple[int, int]) -> bool:
    """p1/q1 ~ p2/q2 under Γ0(N) iff s1 q2 ≡ s2 q1 (mod gcd(q1 q2, N)), p_j s_j ≡ 1 (mod q_j).

    [Cr] Prop. 2.2.3; cusps in lowest terms, ∞ = 1/0 (then s = p = ±1).
    """
    (p1, q1), (p2, q2) = a1, a2

    def s_of(p: int, q: int) -> int:
        if q == 0:
            return p
        return pow(p, -1, abs(q)) if abs(q) > 1 else 0

    m = gcd(q1 * q2, N)
    return (s_of(p1, q1) * q2 - s_of(p2, q2) * q1) % m == 0


# ----------------------------------------------------------------------------------------------
# polynomial action used to check relations
# ----------------------------------------------------------------------------------------------


def act_monomial(i: int, w: int, h: tuple[int, int, int, int]) -> list[int]:
    """Coefficients (of X^m Y^(w−m), m = 0..w) of (X^i Y^(w−i))|h = (aX + bY)^i (cX + dY)^(w−i).

    The right action of [St] §8.2 with h = [[a, b], [c, d]].
    """
    a, b, c, d = h
    out = [0] * (w + 1)
    for s in range(i + 1):
        for t in range(w - i + 1):
            left = comb(i, s) * a**s * b ** (i - s)
            out[s + t] += left * comb(w - i, t) * c**t * d ** (w - i - t)
    return out
