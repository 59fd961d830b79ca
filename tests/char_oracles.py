"""Independent statements of published formulas for spaces with a Dirichlet character χ mod N.

The companion of tests/oracles.py (trivial character), used as oracles by the tests of the
engine.  Nothing here imports from ``builder``: a mistake in the engine cannot hide behind a
shared helper.  All arithmetic is exact (ints, ``Fraction``, exact elements of Q(ζ_m)); floats
appear only in :meth:`Cyc.embeddings`, which the tests use for Deligne's bound.

A character is plain data ``chi = (N, m, e)``: e is a sequence of length N with
χ(n) = ζ_m^e[n] (ζ_m = exp(2πi/m)) when gcd(n, N) = 1 and e[n] = −1 when gcd(n, N) > 1 —
the ``modulus``, ``order``, ``exps`` fields of the engine's character orbits.  m may be any
multiple of the order of χ.

Sources
-------
[CO]  H. Cohen, J. Oesterlé, *Dimensions des espaces de formes modulaires*, in Modular
      Functions of One Variable VI, LNM 627, Springer 1977, 69–78: the formula for
      dim S_k(Γ0(N), χ) − dim M_{2−k}(Γ0(N), χ̄) (restated in [CS] ch. 7).
[CS]  H. Cohen, F. Strömberg, *Modular Forms: A Classical Approach*, AMS GSM 179 (2017),
      ch. 7 (dimension formulas) and Thm 12.4.11 (Eichler–Selberg trace formula on
      S_k(Γ0(N), χ)); the same trace formula is in H. Cohen, *Trace des opérateurs de Hecke
      sur Γ0(N)*, Sém. Théorie des Nombres de Bordeaux 1976–77, exposé 4.
[DS]  F. Diamond, J. Shurman, *A First Course in Modular Forms*, GTM 228 (2005): §4.5–4.6
      (Eisenstein series E_k^{ψ,φ,t}), §5.8 (oldforms and newforms, Thm 5.8.3).
[Li]  W. Li, *Newforms and functional equations*, Math. Ann. 212 (1975) 285–315 (the
      decomposition S_k(N, χ) = ⊕_{cond χ | M | N} ⊕_{d | N/M} S_k^new(M, χ_M)(dz)).
[Mt]  G. Martin, *Dimensions of the spaces of cusp forms and newforms on Γ0(N) and Γ1(N)*,
      J. Number Theory 112 (2005) 298–331 (β, the Dirichlet inverse of σ0).
[YM]  Y. Martin, *Multiplicative η-quotients*, Trans. AMS 348 (1996) 4825–4856, Table I.
[On]  K. Ono, *The Web of Modularity*, CBMS 102, AMS 2004, Thms 1.64, 1.65 (the character
      ((−1)^k s/·), s = ∏ δ^{r_δ}, of an η-quotient and its orders at the cusps).
[Co]  H. Cohen, *A Course in Computational Algebraic Number Theory*, GTM 138, Def. 1.4.8
      (the Kronecker symbol); §5.3 (class numbers, via tests/oracles.py).

What is from memory: the statements of [CO] and of [CS] Thm 12.4.11 with a character, the
list of η-quotients taken from [YM] Table I, and the character formula of [On] Thm 1.64.
Every one of them is validated in tests/test_char_oracles.py (against the trivial-character
oracles, against each other, against Deligne's bound, and against Hecke relations).
"""

from __future__ import annotations

import cmath
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from functools import cache
from math import gcd, isqrt

from tests.oracles import (
    class_number_weighted,
    divisors,
    eta_product,
    factorize,
    is_square,
    martin_beta,
    phi,
    psi,
)

Rational = int | Fraction
Character = tuple[int, int, Sequence[int]]

# ----------------------------------------------------------------------------------------------
# exact arithmetic in Q(ζ_m)
# ----------------------------------------------------------------------------------------------


def _divide_exact(a: list[int], b: Sequence[int]) -> list[int]:
    """Quotient a/b of integer polynomials (coefficient lists, low degree first), b monic."""
    a = list(a)
    db = len(b) - 1
    q = [0] * (len(a) - db)
    for i in range(len(a) - 1 - db, -1, -1):
        c = a[i + db]
        q[i] = c
        if c:
            for j, bj in enumerate(b):
                a[i + j] -= c * bj
    if any(a):
        raise ArithmeticError("inexact polynomial division")
    return q


@cache
def cyclotomic_polynomial(m: int) -> tuple[int, ...]:
    """Φ_m (coefficients, low degree first): x^m − 1 = ∏_{d | m} Φ_d."""
    if m < 1:
        raise ValueError(f"m must be ≥ 1, got {m}")
    num = [-1] + [0] * (m - 1) + [1]
    for d in divisors(m):
        if d < m:
            num = _divide_exact(num, cyclotomic_polynomial(d))
    return tuple(num)


def _mobius(n: int) -> int:
    f = factorize(n)
    return 0 if any(e > 1 for e in f.values()) else (-1) ** len(f)


@cache
def ramanujan_sum(m: int, i: int) -> int:
    """c_m(i) = Tr_{Q(ζ_m)/Q}(ζ_m^i) = Σ_{d | gcd(i, m)} μ(m/d) d."""
    g = gcd(i, m)
    return sum(_mobius(m // d) * d for d in divisors(g))


def units_mod(m: int) -> list[int]:
    """(Z/mZ)^× as the integers 1 ≤ a ≤ m prime to m (just [1] for m = 1)."""
    return [a for a in range(1, m + 1) if gcd(a, m) == 1]


class Cyc:
    """An element Σ_{i < φ(m)} c_i ζ_m^i of Q(ζ_m), c_i ∈ Q, reduced modulo Φ_m (exact).

    The power basis 1, ζ, …, ζ^(φ(m)−1) is a Z-basis of Z[ζ_m], the ring of integers, so an
    element is an algebraic integer iff all c_i are integers.
    """

    __slots__ = ("m", "c")

    def __init__(self, m: int, coeffs: Sequence[Rational]):
        deg = len(cyclotomic_polynomial(m)) - 1
        if len(coeffs) != deg:
            raise ValueError(f"need φ({m}) = {deg} coefficients, got {len(coeffs)}")
        self.m = m
        self.c = tuple(Fraction(x) for x in coeffs)

    # -- constructors ------------------------------------------------------------------------

    @classmethod
    def from_powers(cls, m: int, vec: Sequence[Rational]) -> Cyc:
        """Σ_i vec[i] ζ_m^i for any length of vec (exponents taken as they are, i ≥ 0)."""
        cyc = cyclotomic_polynomial(m)
        deg = len(cyc) - 1
        v = [Fraction(x) for x in vec] + [Fraction(0)] * max(0, deg - len(vec))
        for i in range(len(v) - 1, deg - 1, -1):
            c = v[i]
            if c:
                for j, pj in enumerate(cyc):
                    v[i - deg + j] -= c * pj
        return cls(m, v[:deg])

    @classmethod
    def rational(cls, m: int, q: Rational) -> Cyc:
        return cls.from_powers(m, [q])

    @classmethod
    def zeta(cls, m: int, i: int = 1) -> Cyc:
        """ζ_m^i."""
        v = [0] * m
        v[i % m] = 1
        return cls.from_powers(m, v)

    def _coerce(self, other: object) -> Cyc:
        if isinstance(other, Cyc):
            if other.m != self.m:
                raise ValueError(f"elements of Q(ζ_{self.m}) and Q(ζ_{other.m}) do not mix")
            return other
        if isinstance(other, int | Fraction):
            return Cyc.rational(self.m, other)
        return NotImplemented  # type: ignore[return-value]

    # -- ring operations ---------------------------------------------------------------------

    def __add__(self, other: object) -> Cyc:
        o = self._coerce(other)
        if o is NotImplemented:
            return NotImplemented
        return Cyc(self.m, [a + b for a, b in zip(self.c, o.c, strict=True)])

    __radd__ = __add__

    def __neg__(self) -> Cyc:
        return Cyc(self.m, [-a for a in self.c])

    def __sub__(self, other: object) -> Cyc:
        o = self._coerce(other)
        if o is NotImplemented:
            return NotImplemented
        return self + (-o)

    def __rsub__(self, other: object) -> Cyc:
        return (-self) + other

    def __mul__(self, other: object) -> Cyc:
        o = self._coerce(other)
        if o is NotImplemented:
            return NotImplemented
        prod = [Fraction(0)] * (2 * len(self.c) - 1)
        for i, a in enumerate(self.c):
            if a:
                for j, b in enumerate(o.c):
                    prod[i + j] += a * b
        return Cyc.from_powers(self.m, prod)

    __rmul__ = __mul__

    def __pow__(self, e: int) -> Cyc:
        if e < 0:
            raise ValueError("negative powers are not needed here")
        out = Cyc.rational(self.m, 1)
        for _ in range(e):
            out = out * self
        return out

    def __eq__(self, other: object) -> bool:
        o = self._coerce(other)
        if o is NotImplemented:
            return NotImplemented
        return self.c == o.c

    def __hash__(self) -> int:
        return hash((self.m, self.c))

    def __repr__(self) -> str:
        terms = [f"({a})*z^{i}" for i, a in enumerate(self.c) if a]
        return f"Cyc[{self.m}](" + (" + ".join(terms) or "0") + ")"

    # -- field operations --------------------------------------------------------------------

    def galois(self, a: int) -> Cyc:
        """σ_a: ζ_m ↦ ζ_m^a (a prime to m)."""
        if gcd(a, self.m) != 1:
            raise ValueError(f"σ_a needs gcd(a, m) = 1, got a = {a}, m = {self.m}")
        v = [Fraction(0)] * self.m
        for i, x in enumerate(self.c):
            v[(a * i) % self.m] += x
        return Cyc.from_powers(self.m, v)

    def conj(self) -> Cyc:
        """Complex conjugation σ_{−1}."""
        return self.galois(-1 % self.m if self.m > 1 else 1)

    def trace(self) -> Fraction:
        """Tr_{Q(ζ_m)/Q} = Σ_i c_i c_m(i) (Ramanujan sums)."""
        return sum((x * ramanujan_sum(self.m, i) for i, x in enumerate(self.c)), Fraction(0))

    def is_rational(self) -> bool:
        return not any(self.c[1:])

    def to_rational(self) -> Fraction:
        if not self.is_rational():
            raise ValueError(f"{self!r} is not rational")
        return self.c[0]

    def is_integral(self) -> bool:
        """Algebraic integer ⇔ integral coordinates in the power basis (Z[ζ_m] is maximal)."""
        return all(x.denominator == 1 for x in self.c)

    def mod_ell(self, ell: int, omega: int) -> int:
        """Image in F_ℓ under ζ_m ↦ ω, for a prime ℓ ≡ 1 (mod m) and a root ω of Φ_m mod ℓ."""
        if ell < 2 or any(ell % p == 0 for p in range(2, isqrt(ell) + 1)):
            raise ValueError(f"ℓ = {ell} is not prime")
        if (ell - 1) % self.m:
            raise ValueError(f"ℓ = {ell} is not ≡ 1 mod {self.m}")
        if sum(a * pow(omega, j, ell) for j, a in enumerate(cyclotomic_polynomial(self.m))) % ell:
            raise ValueError(f"ω = {omega} is not a primitive {self.m}-th root of unity mod {ell}")
        out = 0
        for j, x in enumerate(self.c):
            if x.denominator % ell == 0:
                raise ZeroDivisionError(f"ℓ = {ell} divides a denominator of {self!r}")
            out += x.numerator * pow(x.denominator, -1, ell) * pow(omega, j, ell)
        return out % ell

    def embeddings(self) -> list[complex]:
        """The complex values under ζ_m ↦ exp(2πi a/m), a ∈ (Z/m)^× (floats; tests only)."""
        out = []
        for a in units_mod(self.m):
            z = cmath.exp(2j * cmath.pi * a / self.m)
            out.append(sum(float(x) * z**i for i, x in enumerate(self.c)))
        return out


# ----------------------------------------------------------------------------------------------
# characters as plain data (N, m, e)
# ----------------------------------------------------------------------------------------------


@cache
def _checked(N: int, m: int, e: tuple[int, ...]) -> tuple[int, int, tuple[int, ...]]:
    if N < 1 or m < 1 or len(e) != N:
        raise ValueError(f"bad character data: N = {N}, m = {m}, len(e) = {len(e)}")
    for n in range(N):
        if (gcd(n, N) > 1) != (e[n] == -1) or not -1 <= e[n] < m:
            raise ValueError(f"bad exponent e[{n}] = {e[n]} for N = {N}, m = {m}")
    if e[1 % N] != 0:
        raise ValueError("χ(1) must be 1")
    units = [n for n in range(N) if e[n] >= 0]
    for a in units:
        for b in units:
            if e[a * b % N] != (e[a] + e[b]) % m:
                raise ValueError(f"not multiplicative at {a}·{b} mod {N}")
    return N, m, e


def check_character(chi: Character) -> tuple[int, int, tuple[int, ...]]:
    """Validate (N, m, e) (values in μ_m, −1 exactly off the units, multiplicative)."""
    N, m, e = chi
    return _checked(int(N), int(m), tuple(int(x) for x in e))


def trivial_character(N: int) -> tuple[int, int, tuple[int, ...]]:
    """The trivial character mod N as (N, 1, e)."""
    return N, 1, tuple(0 if gcd(n, N) == 1 else -1 for n in range(N))


def char_exponent(chi: Character, n: int) -> int:
    """e(n mod N): χ(n) = ζ_m^e(n), −1 when gcd(n, N) > 1."""
    N, _m, e = check_character(chi)
    return e[n % N]


def char_value(chi: Character, n: int) -> Cyc:
    """χ(n) ∈ Q(ζ_m) (0 when gcd(n, N) > 1)."""
    _N, m, _e = check_character(chi)
    x = char_exponent(chi, n)
    return Cyc.rational(m, 0) if x < 0 else Cyc.zeta(m, x)


def parity(chi: Character) -> int:
    """χ(−1) = ±1."""
    _N, m, _e = check_character(chi)
    x = char_exponent(chi, -1)
    if x == 0:
        return 1
    if 2 * x == m:
        return -1
    raise ValueError("χ(−1) is not ±1: not a character")  # pragma: no cover


@cache
def _conductor(N: int, m: int, e: tuple[int, ...]) -> int:
    for f in divisors(N):
        if all(e[n] == 0 for n in range(N) if e[n] >= 0 and (n - 1) % f == 0):
            return f
    raise AssertionError("unreachable: f = N always works")  # pragma: no cover


def conductor(chi: Character) -> int:
    """The least f | N with χ(n) = 1 for all n ≡ 1 (mod f) prime to N ([Ap] §8.7)."""
    N, m, e = check_character(chi)
    return _conductor(N, m, e)


def is_trivial(chi: Character) -> bool:
    return conductor(chi) == 1


def character_at_level(chi: Character, M: int) -> tuple[int, int, tuple[int, ...]]:
    """χ_M: the character mod M (cond χ | M | N) induced by the primitive character of χ.

    χ_M(x) = χ(y) for any y ≡ x (mod M) prime to N (well defined because cond χ | M); the
    value list keeps the same m.
    """
    N, m, e = check_character(chi)
    if N % M or M % conductor(chi):
        raise ValueError(f"need cond(χ) = {conductor(chi)} | M = {M} | N = {N}")
    out = []
    for x in range(M):
        if gcd(x, M) > 1:
            out.append(-1)
            continue
        vals = {e[y] for y in range(x, N, M) if gcd(y, N) == 1}
        assert len(vals) == 1, (chi, M, x, vals)  # well defined
        out.append(vals.pop())
    return check_character((M, m, tuple(out)))


def kronecker(D: int, n: int) -> int:
    """The Kronecker symbol (D/n) for n ≥ 1 ([Co] Def. 1.4.8), by its definition.

    Multiplicative in n; (D/p) = D^((p−1)/2) mod p (Legendre, Euler's criterion) for odd p;
    (D/2) = 0 for even D, +1 for D ≡ ±1 (mod 8), −1 for D ≡ ±3 (mod 8).
    """
    if n < 1:
        raise ValueError(f"n must be ≥ 1, got {n}")
    out = 1
    for p, a in factorize(n).items():
        if p == 2:
            s = 0 if D % 2 == 0 else (1 if D % 8 in (1, 7) else -1)
        else:
            r = pow(D, (p - 1) // 2, p)
            s = 0 if r == 0 else (1 if r == 1 else -1)
        out *= s**a
    return out


def kronecker_character(D: int, N: int) -> tuple[int, int, tuple[int, ...]]:
    """n ↦ (D/n) as a character mod N, as data (N, 2, e); D a discriminant with D | N."""
    if N % abs(D):
        raise ValueError(f"need |D| = {abs(D)} | N = {N}")
    e = []
    for n in range(N):
        if gcd(n, N) > 1:
            e.append(-1)
        else:
            s = kronecker(D, n if n else N)
            e.append(0 if s == 1 else 1)
    return check_character((N, 2, tuple(e)))


def _char_sum(chi: Character, cond) -> Cyc:
    """Σ χ(x) over x mod N (as 0..N−1) with cond(x), exact."""
    N, m, e = chi
    counts = [0] * m
    for x in range(N):
        if cond(x):
            if e[x] < 0:
                raise AssertionError("a root that is not a unit")  # pragma: no cover
            counts[e[x]] += 1
    return Cyc.from_powers(m, counts)


# ----------------------------------------------------------------------------------------------
# [CO]: dimensions of S_k, M_k and the Eisenstein space with character
# ----------------------------------------------------------------------------------------------


def co_lambda(r: int, s: int, p: int) -> int:
    """λ(r_p, s_p, p) of [CO] (from memory): p^r ∥ N, p^s ∥ cond(χ), r ≥ 1.

    2s ≤ r:  p^(r/2) + p^(r/2 − 1) for r even,  2 p^((r−1)/2) for r odd;
    2s > r:  2 p^(r − s).
    """
    if 2 * s <= r:
        return p ** (r // 2) + p ** (r // 2 - 1) if r % 2 == 0 else 2 * p ** (r // 2)
    return 2 * p ** (r - s)


def _lambda_product(chi: Character) -> int:
    N = chi[0]
    fac_f = factorize(conductor(chi))
    out = 1
    for p, r in factorize(N).items():
        out *= co_lambda(r, fac_f.get(p, 0), p)
    return out


def _gamma4(k: int) -> Fraction:
    """γ4(k) of [CO]: −1/4, 0, 1/4 for k ≡ 2, odd, 0 (mod 4)."""
    return {0: Fraction(1, 4), 2: Fraction(-1, 4)}.get(k % 4, Fraction(0))


def _gamma3(k: int) -> Fraction:
    """γ3(k) of [CO]: −1/3, 0, 1/3 for k ≡ 2, 1, 0 (mod 3)."""
    return {0: Fraction(1, 3), 1: Fraction(0), 2: Fraction(-1, 3)}[k % 3]


def _co_main(chi: Character, k: int) -> Fraction:
    """(k − 1)/12 ψ(N) + γ4(k) Σ_{x² + 1 ≡ 0} χ(x) + γ3(k) Σ_{x² + x + 1 ≡ 0} χ(x)."""
    chi = check_character(chi)
    N = chi[0]
    s4 = _char_sum(chi, lambda x: (x * x + 1) % N == 0).to_rational()
    s3 = _char_sum(chi, lambda x: (x * x + x + 1) % N == 0).to_rational()
    return Fraction((k - 1) * psi(N), 12) + _gamma4(k) * s4 + _gamma3(k) * s3


def _check_weight(chi: Character, k: int) -> bool:
    """Validate; True iff χ(−1) = (−1)^k (else the space is 0)."""
    check_character(chi)
    if k < 2:
        raise ValueError(f"the formulas here need k ≥ 2, got {k}")
    return parity(chi) == (-1) ** k


def dim_cusp_char(chi: Character, k: int) -> int:
    """dim S_k(Γ0(N), χ), k ≥ 2, by the Cohen–Oesterlé formula ([CO]; [CS] ch. 7).

    The statement followed (written from memory): for χ(−1) = (−1)^k, with N = ∏ p^(r_p),
    cond(χ) = ∏ p^(s_p),

        dim S_k(N, χ) − dim M_{2−k}(N, χ̄) = (k − 1)/12 · ψ(N) − 1/2 ∏_{p | N} λ(r_p, s_p, p)
                                        + γ4(k) Σ_{x mod N, x² + 1 ≡ 0 (N)} χ(x)
                                        + γ3(k) Σ_{x mod N, x² + x + 1 ≡ 0 (N)} χ(x),

    λ as in :func:`co_lambda`, γ4, γ3 as in :func:`_gamma4`, :func:`_gamma3`, and
    dim M_{2−k}(N, χ̄) = 1 if k = 2 and χ is trivial (the constants), else 0.  0 when
    χ(−1) ≠ (−1)^k.
    """
    if not _check_weight(chi, k):
        return 0
    d = _co_main(chi, k) - Fraction(_lambda_product(chi), 2)
    if k == 2 and is_trivial(chi):
        d += 1
    assert d.denominator == 1 and d >= 0, (chi, k, d)
    return int(d)


def dim_modular_char(chi: Character, k: int) -> int:
    """dim M_k(Γ0(N), χ), k ≥ 2 ([CO], from memory): as :func:`dim_cusp_char` with + 1/2 ∏ λ.

        dim M_k(N, χ) − dim S_{2−k}(N, χ̄) = (k − 1)/12 ψ(N) + 1/2 ∏ λ + γ4(k) Σ + γ3(k) Σ,

    and S_{2−k} = 0 for k ≥ 2.
    """
    if not _check_weight(chi, k):
        return 0
    d = _co_main(chi, k) + Fraction(_lambda_product(chi), 2)
    assert d.denominator == 1 and d >= 0, (chi, k, d)
    return int(d)


def dim_eisenstein_char(chi: Character, k: int) -> int:
    """dim E_k(Γ0(N), χ) = ∏_{p | N} λ(r_p, s_p, p), minus 1 if k = 2 and χ is trivial ([CO]).

    (The difference of the two formulas above; for trivial χ, ∏ λ is the number of cusps.)
    """
    if not _check_weight(chi, k):
        return 0
    return _lambda_product(chi) - (1 if k == 2 and is_trivial(chi) else 0)


def dim_new_char(chi: Character, k: int) -> int:
    """dim S_k^new(Γ0(N), χ) = Σ_{cond χ | M | N} β(N/M) dim S_k(M, χ_M)  ([Li]; [Mt] β).

    Inverts dim S_k(N, χ) = Σ_{cond χ | M | N} σ0(N/M) dim S_k^new(M, χ_M) ([Li], [DS] §5.8):
    β = σ0^(−1) under Dirichlet convolution is multiplicative with β(p) = −2, β(p²) = 1,
    β(p^r) = 0 for r ≥ 3.
    """
    N = check_character(chi)[0]
    f = conductor(chi)
    out = 0
    for M in divisors(N):
        if M % f == 0:
            out += martin_beta(N // M) * dim_cusp_char(character_at_level(chi, M), k)
    assert out >= 0, (chi, k, out)
    return out


# ----------------------------------------------------------------------------------------------
# [CS] Thm 12.4.11 / Cohen (1977): Eichler–Selberg trace formula with character
# ----------------------------------------------------------------------------------------------


def _lucas(t: int, n: int, j: int) -> int:
    """(ρ^j − ρ̄^j)/(ρ − ρ̄), ρ, ρ̄ the roots of x² − t x + n.

    u_0 = 0, u_1 = 1, u_{i+1} = t u_i − n u_{i−1}.
    """
    u0, u1 = 0, 1
    if j == 0:
        return 0
    for _ in range(j - 1):
        u0, u1 = u1, t * u1 - n * u0
    return u1


def _crt_pair(a: int, A: int, b: int, B: int) -> int:
    """The y in [0, lcm(A, B)) with y ≡ a (mod A), y ≡ b (mod B) (a ≡ b mod gcd(A, B))."""
    L = A * B // gcd(A, B)
    for y in range(a % A, L, A):
        if (y - b) % B == 0:
            return y
    raise ValueError("incompatible congruences")


def trace_hecke_char(n: int, chi: Character, k: int) -> Cyc:
    """Tr(T_n | S_k(Γ0(N), χ)) ∈ Q(ζ_m) for k ≥ 2, n ≥ 1, gcd(n, N) = 1 (Eichler–Selberg).

    [CS] Thm 12.4.11 (Cohen 1977), written from memory of that statement; here T_p acts by
    a_n ↦ a_{np} + χ(p) p^(k−1) a_{n/p}.  f(χ) = cond χ, ψ(N) = [SL2(Z) : Γ0(N)]:

        Tr T_n = A1 + A2 + A3 + A4,
        A1 = n^(k/2 − 1) χ(√n) (k − 1)/12 ψ(N)                      if n is a square, else 0;
        A2 = −1/2 Σ_{t ∈ Z, t² < 4n} P_k(t, n) Σ_f h_w((t² − 4n)/f²) μ(t, f, n),
             P_k(t, n) = (ρ^(k−1) − ρ̄^(k−1))/(ρ − ρ̄), ρ + ρ̄ = t, ρ ρ̄ = n;
             f ≥ 1 with f² | t² − 4n and (t² − 4n)/f² ≡ 0, 1 (mod 4);
             h_w(D) = h(D)/(w(D)/2);  N_f = gcd(N, f);
             μ(t, f, n) = ψ(N)/ψ(N/N_f) · Σ_{x mod N, x² − t x + n ≡ 0 (mod N·N_f)} χ(x);
        A3 = −1/2 Σ_{d | n} min(d, n/d)^(k−1) Σ_τ φ(gcd(τ, N/τ)) χ(y_τ),
             τ | N with gcd(τ, N/τ) | gcd(N/f(χ), n/d − d),
             y_τ ≡ d (mod τ), y_τ ≡ n/d (mod N/τ) (defined mod lcm(τ, N/τ), a multiple of f(χ));
        A4 = Σ_{t | n, gcd(N, n/t) = 1} t    if k = 2 and χ is trivial, else 0.

    0 when χ(−1) ≠ (−1)^k.  For trivial χ this is tests/oracles.py's ``trace_hecke``.
    """
    N, m, e = check_character(chi)
    if n < 1 or gcd(n, N) != 1:
        raise ValueError(f"need n ≥ 1 with gcd(n, N) = 1, got n = {n}, N = {N}")
    if not _check_weight(chi, k):
        return Cyc.rational(m, 0)
    acc = [Fraction(0)] * m  # coefficient of ζ_m^i, i = 0..m−1
    # A1
    if is_square(n):
        r = isqrt(n)
        acc[e[r % N]] += Fraction((k - 1) * psi(N) * r ** (k - 2), 12)
    # A2
    R = isqrt(4 * n)
    for t in range(-R, R + 1):
        disc = t * t - 4 * n
        if disc >= 0:
            continue
        P = _lucas(t, n, k - 1)
        if P == 0:
            continue
        for f in range(1, isqrt(-disc) + 1):
            if disc % (f * f) or (disc // (f * f)) % 4 not in (0, 1):
                continue
            Nf = gcd(N, f)
            mod = N * Nf
            w = class_number_weighted(disc // (f * f)) * Fraction(psi(N), psi(N // Nf)) * P / 2
            for x in range(N):
                if (x * x - t * x + n) % mod == 0:
                    acc[e[x]] -= w  # x is a unit: x (t − x) ≡ n
    # A3
    fchi = _conductor(N, m, e)
    for d in divisors(n):
        dd = n // d
        c = Fraction(min(d, dd) ** (k - 1), 2)
        for tau in divisors(N):
            g = gcd(tau, N // tau)
            if (N // fchi) % g or (dd - d) % g:
                continue
            y = _crt_pair(d, tau, dd, N // tau)
            assert e[y % N] >= 0
            acc[e[y % N]] -= c * phi(g)
    # A4
    if k == 2 and fchi == 1:
        acc[0] += sum(t for t in divisors(n) if gcd(N, n // t) == 1)
    return Cyc.from_powers(m, acc)


# ----------------------------------------------------------------------------------------------
# [YM] Table I: multiplicative η-quotients with a nontrivial quadratic character
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EtaCharSpec:
    """∏ η(δz)^{r_δ} ∈ S_k(Γ0(N), (D/·)), a newform (from [YM] Table I)."""

    name: str
    level: int
    weight: int
    factors: tuple[tuple[int, int], ...]  # (δ, r_δ)
    disc: int  # the character is the Kronecker symbol (D/·), as a character mod level


#: All entries are FROM MEMORY of [YM] Table I (levels, weights and characters); the character
#: is also ((−1)^k s/·), s = ∏ δ^{r_δ}, by [On] Thm 1.64, which the tests check, together with
#: [On] Thm 1.64's level conditions, the orders at all cusps ([On] Thm 1.65), dim ≥ 1 and
#: agreement with the trace formula where the space is one-dimensional.
ETA_CHAR_SPECS: tuple[EtaCharSpec, ...] = (
    EtaCharSpec("eta(z)^3 eta(7z)^3", 7, 3, ((1, 3), (7, 3)), -7),
    EtaCharSpec("eta(z)^2 eta(2z) eta(4z) eta(8z)^2", 8, 3, ((1, 2), (2, 1), (4, 1), (8, 2)), -8),
    EtaCharSpec("eta(2z)^3 eta(6z)^3", 12, 3, ((2, 3), (6, 3)), -3),
    EtaCharSpec("eta(4z)^6", 16, 3, ((4, 6),), -4),
    EtaCharSpec("eta(z)^4 eta(2z)^2 eta(4z)^4", 4, 5, ((1, 4), (2, 2), (4, 4)), -4),
)


@dataclass(frozen=True)
class EtaCharForm:
    name: str
    level: int
    weight: int
    chi: tuple[int, int, tuple[int, ...]]  # (N, 2, e)
    coeffs: tuple[int, ...]  # a_1..a_B
    factors: tuple[tuple[int, int], ...]


def eta_char_forms(B: int) -> list[EtaCharForm]:
    """The forms of :data:`ETA_CHAR_SPECS` with a_1..a_B (tests/oracles.py's eta_product)."""
    out = []
    for s in ETA_CHAR_SPECS:
        coeffs = eta_product(dict(s.factors), B)
        chi = kronecker_character(s.disc, s.level)
        out.append(EtaCharForm(s.name, s.level, s.weight, chi, tuple(coeffs), s.factors))
    return out
