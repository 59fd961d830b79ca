"""Closed formulas for S_k(Γ0(N), χ) with a Dirichlet character χ: dimensions and traces.

The character analogue of builder/checks/formulas.py, for `nfb verify`: written from the
published statements, independently of the engine (this module imports only
builder.checks.formulas and builder.characters — never builder.symbols, builder.forms or
builder.linalg*), so that a stored table can be re-checked against mathematics that was
not used to build it.

Sources
-------
[CO]  H. Cohen, J. Oesterlé, *Dimensions des espaces de formes modulaires*, LNM 627
      (1977), Thm 1: for k ≥ 2 and χ(−1) = (−1)^k,
          dim S_k(N, χ) − dim M_{2−k}(N, χ̄)
            = (k−1)/12 · ψ(N) − ½ ∏_{p|N} λ(r_p, s_p, p)
              + ε_k Σ_{x mod N, x²+1 ≡ 0} χ(x) + μ_k Σ_{x mod N, x²+x+1 ≡ 0} χ(x),
      N = ∏ p^r_p, cond(χ) = ∏ p^s_p, λ(r, s, p) = p^r' + p^(r'−1) if 2s ≤ r = 2r',
      2p^r' if 2s ≤ r = 2r' + 1, 2p^(r−s) if 2s > r; ε_k = 0, −1/4, 1/4 for k odd,
      k ≡ 2, k ≡ 0 (mod 4); μ_k = 0, −1/3, 1/3 for k ≡ 1, 2, 0 (mod 3).  The Eisenstein
      part for k ≥ 2 has dimension ∏ λ(r_p, s_p, p), minus 1 when k = 2 and χ = 1.
[CS]  H. Cohen, F. Strömberg, *Modular Forms: A Classical Approach*, AMS GSM 179:
      ch. 7 (the same dimension formulas), Thm 12.4.11 (Eichler–Selberg trace formula
      on S_k(Γ0(N), χ)), here with gcd(n, N) = 1.
[Ch]  H. Cohen, *Trace des opérateurs de Hecke sur Γ0(N)*, Sém. Théorie des Nombres
      de Bordeaux 1976–77, exposé 4 (the trace formula, same statement as [CS]).
[Mt]  G. Martin, J. Number Theory 112 (2005): S_k(N, χ) = ⊕_{cond(χ) | M | N}
      σ0(N/M) copies of S_k^new(M, χ_M) (as Hecke modules away from N), hence
      dim S_k^new(N, χ) = Σ_M β(N/M) dim S_k(M, χ_M) with β the Dirichlet inverse of σ0
      (β(p) = −2, β(p²) = 1, β(p^r) = 0 for r ≥ 3).  Martin states it for Γ0(N) and Γ1(N);
      the character-by-character form is the same newform theory (Atkin–Lehner–Li),
      written here from memory.

The statements above were written down from memory of the cited texts and checked in
tests/test_char_formulas.py (trivial character against formulas.py, Tr T_1 against the
dimension formula, Deligne's bound, Hecke relations, a known eta product, and the sum
over all characters against dim S_k(Γ1(N))).

Characters are passed as ``CharacterOrbit`` objects (builder.characters): the orbit's
representative χ (the character numbered ``number``), whose values are
χ(x) = ζ_m^e(x), m = order, e = ``exps``.  The Galois conjugate χ^a (gcd(a, m) = 1) is
selected by the ``a`` parameter where it matters (traces); dimensions do not depend on a.
``None`` stands for the trivial character mod N.

Values of traces live in Q(ζ_m) and are returned as exact :class:`Cyclotomic` numbers.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from math import gcd, isqrt

from builder.characters import CharacterOrbit, character_orbits, root_of_unity
from builder.checks.formulas import (
    class_number_weighted,
    divisors,
    euler_phi,
    factorize,
    moebius,
    psi,
    sigma0,
)

Rational = int | Fraction

# ----------------------------------------------------------------------------- Q(ζ_m)


def _norm(c: Rational) -> Rational:
    """A Fraction with denominator 1 becomes an int (so that integral values are ints)."""
    if isinstance(c, Fraction) and c.denominator == 1:
        return c.numerator
    return c


@lru_cache(maxsize=1024)
def cyclotomic_polynomial(m: int) -> tuple[int, ...]:
    """Φ_m as integer coefficients, constant term first: x^m − 1 = ∏_{d|m} Φ_d."""
    if m < 1:
        raise ValueError(f"cyclotomic_polynomial needs m ≥ 1, got {m}")
    num = [-1] + [0] * (m - 1) + [1]
    for d in divisors(m):
        if d < m:
            num = _exact_div(num, list(cyclotomic_polynomial(d)))
    return tuple(num)


def _exact_div(a: list[int], b: list[int]) -> list[int]:
    """a / b for integer polynomials with b monic and b | a (constant term first)."""
    a = list(a)
    db = len(b) - 1
    q = [0] * (len(a) - db)
    for i in range(len(a) - 1, db - 1, -1):
        c = a[i]
        if c:
            q[i - db] = c
            for j in range(db + 1):
                a[i - db + j] -= c * b[j]
    if any(a[:db]):
        raise ArithmeticError("inexact polynomial division")
    return q


@lru_cache(maxsize=1024)
def _power_table(m: int) -> tuple[tuple[int, ...], ...]:
    """x^j mod Φ_m for j = 0..m−1, each as φ(m) integer coefficients."""
    phi = euler_phi(m)
    cyc = cyclotomic_polynomial(m)
    rows = []
    v = [1] + [0] * (phi - 1)
    for _ in range(m):
        rows.append(tuple(v))
        top = v[-1]
        v = [0] + v[:-1]
        if top:
            for i in range(phi):
                v[i] -= top * cyc[i]
    return tuple(rows)


def _reduce_cyclic(m: int, vec) -> tuple[Rational, ...]:
    """Σ_j vec[j] ζ_m^j (any length; exponents read modulo m) in the power basis."""
    phi = euler_phi(m)
    folded: list[Rational] = [0] * m
    for j, c in enumerate(vec):
        if c:
            folded[j % m] += c
    table = _power_table(m)
    out: list[Rational] = [0] * phi
    for j, c in enumerate(folded):
        if c:
            row = table[j]
            for i in range(phi):
                if row[i]:
                    out[i] += c * row[i]
    return tuple(_norm(c) for c in out)


def _ramanujan_sum(m: int, j: int) -> int:
    """Tr_{Q(ζ_m)/Q}(ζ_m^j) = μ(m/g) φ(m)/φ(m/g), g = gcd(j, m)."""
    g = gcd(j, m)
    return moebius(m // g) * euler_phi(m) // euler_phi(m // g)


class Cyclotomic:
    """An exact element of Q(ζ_m): Σ_{i < φ(m)} c_i ζ_m^i with c_i ints or Fractions.

    ``Cyclotomic(m, vec)`` reads vec as Σ_j vec[j] ζ_m^j for any length (exponents are
    taken modulo m, then reduced modulo Φ_m).  The powers 1, ζ, …, ζ^(φ(m)−1) are a
    Z-basis of the ring of integers Z[ζ_m], so an element is an algebraic integer exactly
    when its coefficients are integers.  Elements of Q(ζ_m) and Q(ζ_m') are combined in
    Q(ζ_lcm) with ζ_m = ζ_lcm^(lcm/m).  Rationals (int, Fraction) mix in freely.
    """

    __slots__ = ("m", "coeffs")
    __hash__ = None  # equality crosses representations (m vs lcm), so no hash

    def __init__(self, m: int, vec=(0,)):
        if m < 1:
            raise ValueError(f"Cyclotomic needs m ≥ 1, got {m}")
        self.m = m
        self.coeffs = _reduce_cyclic(m, vec)

    @classmethod
    def zeta(cls, m: int, j: int = 1) -> Cyclotomic:
        """ζ_m^j."""
        vec = [0] * m
        vec[j % m] = 1
        return cls(m, vec)

    @classmethod
    def rational(cls, m: int, c: Rational) -> Cyclotomic:
        return cls(m, (c,))

    # --- coercion
    def _lift(self, L: int) -> Cyclotomic:
        """The same number written in Q(ζ_L), m | L."""
        if L == self.m:
            return self
        s = L // self.m
        vec = [0] * L
        for i, c in enumerate(self.coeffs):
            vec[i * s] = c
        return Cyclotomic(L, vec)

    def _common(self, other) -> tuple[Cyclotomic, Cyclotomic] | None:
        if isinstance(other, (int, Fraction)):
            return self, Cyclotomic.rational(self.m, other)
        if isinstance(other, Cyclotomic):
            L = self.m * other.m // gcd(self.m, other.m)
            return self._lift(L), other._lift(L)
        return None

    # --- ring operations
    def __add__(self, other):
        pair = self._common(other)
        if pair is None:
            return NotImplemented
        x, y = pair
        return Cyclotomic(x.m, [a + b for a, b in zip(x.coeffs, y.coeffs, strict=True)])

    __radd__ = __add__

    def __neg__(self):
        return Cyclotomic(self.m, [-c for c in self.coeffs])

    def __sub__(self, other):
        pair = self._common(other)
        if pair is None:
            return NotImplemented
        x, y = pair
        return Cyclotomic(x.m, [a - b for a, b in zip(x.coeffs, y.coeffs, strict=True)])

    def __rsub__(self, other):
        return (-self) + other

    def __mul__(self, other):
        if isinstance(other, (int, Fraction)):
            return Cyclotomic(self.m, [c * other for c in self.coeffs])
        pair = self._common(other)
        if pair is None:
            return NotImplemented
        x, y = pair
        prod: list[Rational] = [0] * (2 * len(x.coeffs))
        for i, a in enumerate(x.coeffs):
            if a:
                for j, b in enumerate(y.coeffs):
                    if b:
                        prod[i + j] += a * b
        return Cyclotomic(x.m, prod)

    __rmul__ = __mul__

    def __eq__(self, other):
        pair = self._common(other)
        if pair is None:
            return NotImplemented
        x, y = pair
        return x.coeffs == y.coeffs

    # --- Galois action, traces, reductions
    def conjugate(self, a: int) -> Cyclotomic:
        """σ_a: ζ_m ↦ ζ_m^a (gcd(a, m) = 1); a = −1 is complex conjugation."""
        if gcd(a, self.m) != 1:
            raise ValueError(f"σ_a needs gcd(a, m) = 1, got a={a}, m={self.m}")
        vec: list[Rational] = [0] * self.m
        for i, c in enumerate(self.coeffs):
            vec[(a * i) % self.m] += c
        return Cyclotomic(self.m, vec)

    def trace(self) -> Rational:
        """Tr_{Q(ζ_m)/Q} = Σ_{a ∈ (Z/m)^×} σ_a (Ramanujan sums on the power basis)."""
        return _norm(sum((c * _ramanujan_sum(self.m, i) for i, c in enumerate(self.coeffs)),
                         Fraction(0)))

    def is_rational(self) -> bool:
        return not any(self.coeffs[1:])

    def to_rational(self) -> Rational:
        if not self.is_rational():
            raise ValueError(f"{self!r} is not rational")
        return self.coeffs[0]

    def is_integral(self) -> bool:
        """An algebraic integer: all power-basis coefficients are integers."""
        return all(isinstance(c, int) for c in self.coeffs)

    def reduce_mod(self, ell: int, omega: int | None = None) -> int:
        """The image in F_ℓ under ζ_m ↦ ω, ℓ prime ≡ 1 (mod m).

        ω defaults to builder.characters.root_of_unity(ℓ, m), the fixed ζ_m ↦ ω of
        ``CharacterOrbit.values_mod``; denominators must be prime to ℓ.
        """
        if (ell - 1) % self.m:
            raise ValueError(f"ℓ = {ell} is not ≡ 1 modulo m = {self.m}")
        w = root_of_unity(ell, self.m) if omega is None else omega % ell
        if pow(w, self.m, ell) != 1:
            raise ValueError(f"ω = {w} is not an m-th root of unity modulo {ell}")
        out = 0
        wi = 1
        for c in self.coeffs:
            if c:
                if isinstance(c, Fraction):
                    if c.denominator % ell == 0:
                        raise ZeroDivisionError(f"denominator of {c} vanishes modulo {ell}")
                    c = c.numerator * pow(c.denominator, -1, ell)
                out += c * wi
            wi = wi * w % ell
        return out % ell

    def __repr__(self) -> str:
        terms = [f"{c}" if i == 0 else f"({c})*z{self.m}^{i}"
                 for i, c in enumerate(self.coeffs) if c]
        return "Cyclotomic(" + (" + ".join(terms) if terms else "0") + f"; m={self.m})"


# ----------------------------------------------------------------------------- characters


@dataclass(frozen=True)
class _Chi:
    """χ^a mod N as raw data: χ^a(x) = ζ_m^e[x] (e[x] = −1 when gcd(x, N) > 1)."""

    N: int
    m: int
    conductor: int
    e: tuple[int, ...]

    @property
    def trivial(self) -> bool:
        return self.m == 1

    @property
    def parity(self) -> int:
        return 1 if self.e[(self.N - 1) % self.N] in (0, -1) else -1


@lru_cache(maxsize=4096)
def _as_chi(N: int, chi: CharacterOrbit | None, a: int = 1) -> _Chi:
    if N < 1:
        raise ValueError(f"level N must be ≥ 1, got {N}")
    if chi is None:
        chi = character_orbits(N)[0]
    if chi.modulus != N:
        raise ValueError(f"the character is modulo {chi.modulus}, not the level N = {N}")
    m = chi.order
    if gcd(a, m) != 1:
        raise ValueError(f"conjugate χ^a needs gcd(a, order) = 1, got a={a}, order={m}")
    e = tuple(-1 if x < 0 else (a * x) % m for x in chi.exps)
    return _Chi(N, m, chi.conductor, e)


def _induce(chi: _Chi, M: int) -> _Chi:
    """χ_M: the character mod M induced by the primitive character behind χ (cond | M)."""
    f = chi.conductor
    if M % f:
        raise ValueError(f"the conductor {f} does not divide M = {M}")
    if M == chi.N:
        return chi
    e = []
    for x in range(M):
        if gcd(x, M) != 1:
            e.append(-1)
            continue
        # a lift x' ≡ x (mod f) prime to N: χ_prim(x) = χ(x')
        y = x % f if f > 1 else 1
        while gcd(y, chi.N) != 1:
            y += f
        e.append(chi.e[y % chi.N])
    return _Chi(M, chi.m, f, tuple(e))


def character_value(chi: CharacterOrbit, x: int, a: int = 1) -> Cyclotomic:
    """χ^a(x) in Q(ζ_order) (0 when gcd(x, N) > 1)."""
    c = _as_chi(chi.modulus, chi, a)
    e = c.e[x % c.N]
    return Cyclotomic(c.m) if e < 0 else Cyclotomic.zeta(c.m, e)


def induced_character(chi: CharacterOrbit, M: int) -> tuple[CharacterOrbit, int]:
    """(orbit, a) with orbit ∈ character_orbits(M) and χ_M = (orbit's representative)^a.

    χ_M is the character mod M induced by the primitive character behind χ (needs
    cond(χ) | M); χ_M has the same order m, so ζ_m is the same in both, and
    (χ^b)_M = (orbit's representative)^(a·b).
    """
    target = _induce(_as_chi(chi.modulus, chi), M)
    for orb in character_orbits(M):
        if orb.order != target.m or orb.conductor != target.conductor:
            continue
        for a in orb.conjugates():
            if all((x < 0 and y < 0) or (x >= 0 and (a * x) % orb.order == y)
                   for x, y in zip(orb.exps, target.e, strict=True)):
                return orb, a
    raise AssertionError(f"no character mod {M} matches the one induced from {chi}")


def _root_sum(chi: _Chi, b: int, c: int) -> Cyclotomic:
    """Σ χ(x) over x mod N with x² + b x + c ≡ 0 (mod N)."""
    vec = [0] * chi.m
    for x in range(chi.N):
        if (x * x + b * x + c) % chi.N == 0 and chi.e[x] >= 0:
            vec[chi.e[x]] += 1
    return Cyclotomic(chi.m, vec)


# ----------------------------------------------------------------------------- dimensions


def _lambda(r: int, s: int, p: int) -> int:
    """λ(r, s, p) of [CO] Thm 1."""
    if 2 * s <= r:
        if r % 2 == 0:
            return p ** (r // 2) + p ** (r // 2 - 1)
        return 2 * p ** (r // 2)
    return 2 * p ** (r - s)


def _lambda_prod(N: int, cond: int) -> int:
    out = 1
    for p, r in factorize(N):
        s = 0
        f = cond
        while f % p == 0:
            f //= p
            s += 1
        out *= _lambda(r, s, p)
    return out


def _check_weight(k: int) -> None:
    if k < 2:
        raise ValueError(f"these formulas need weight k ≥ 2, got {k}")


def _dim_cusp(chi: _Chi, k: int) -> int:
    _check_weight(k)
    if chi.parity != (-1) ** k:
        return 0
    N = chi.N
    d = Fraction(k - 1, 12) * psi(N) - Fraction(_lambda_prod(N, chi.conductor), 2)
    if k % 2 == 0:
        eps = Fraction(1, 4) if k % 4 == 0 else Fraction(-1, 4)
        d += eps * _root_sum(chi, 0, 1).to_rational()
    mu = {0: Fraction(1, 3), 1: Fraction(0), 2: Fraction(-1, 3)}[k % 3]
    if mu:
        d += mu * _root_sum(chi, 1, 1).to_rational()
    if k == 2 and chi.trivial:
        d += 1  # dim M_0(N, 1) = 1: the constants
    if d.denominator != 1 or d < 0:
        raise ArithmeticError(f"Cohen–Oesterlé gave {d} for N={N} k={k}")
    return int(d)


def _dim_eisenstein(chi: _Chi, k: int) -> int:
    _check_weight(k)
    if chi.parity != (-1) ** k:
        return 0
    return _lambda_prod(chi.N, chi.conductor) - (1 if k == 2 and chi.trivial else 0)


def dim_cusp(N: int, k: int, chi: CharacterOrbit | None = None) -> int:
    """dim S_k(Γ0(N), χ) for k ≥ 2 by [CO] Thm 1 ([CS] ch. 7); 0 if χ(−1) ≠ (−1)^k."""
    return _dim_cusp(_as_chi(N, chi), k)


def dim_eisenstein(N: int, k: int, chi: CharacterOrbit | None = None) -> int:
    """dim E_k(Γ0(N), χ) = ∏_p λ(r_p, s_p, p) − [k = 2, χ = 1] ([CO], [CS] ch. 7)."""
    return _dim_eisenstein(_as_chi(N, chi), k)


def dim_modular(N: int, k: int, chi: CharacterOrbit | None = None) -> int:
    """dim M_k(Γ0(N), χ) = dim S_k + dim E_k (k ≥ 2)."""
    c = _as_chi(N, chi)
    return _dim_cusp(c, k) + _dim_eisenstein(c, k)


def _beta(n: int) -> int:
    """β of [Mt]: the Dirichlet inverse of σ0 (β(p) = −2, β(p²) = 1, β(p^r) = 0, r ≥ 3)."""
    out = 1
    for _, e in factorize(n):
        out *= {1: -2, 2: 1}.get(e, 0)
    return out


def _levels(chi: _Chi) -> list[int]:
    """The M with cond(χ) | M | N."""
    return [M for M in divisors(chi.N) if M % chi.conductor == 0]


def dim_new(N: int, k: int, chi: CharacterOrbit | None = None) -> int:
    """dim S_k^new(Γ0(N), χ) = Σ_{cond(χ) | M | N} β(N/M) dim S_k(Γ0(M), χ_M)  ([Mt])."""
    c = _as_chi(N, chi)
    d = sum(_beta(N // M) * _dim_cusp(_induce(c, M), k) for M in _levels(c))
    if d < 0:
        raise ArithmeticError(f"negative new dimension {d} for N={N} k={k}")
    return d


# ----------------------------------------------------------------------------- trace formula


def _lucas(t: int, n: int, m: int) -> int:
    """(ρ^m − ρ̄^m)/(ρ − ρ̄) for the roots of X² − tX + n (u_0 = 0, u_1 = 1)."""
    if m == 0:
        return 0
    u0, u1 = 0, 1
    for _ in range(m - 1):
        u0, u1 = u1, t * u1 - n * u0
    return u1


@lru_cache(maxsize=16384)
def _geometry(N: int, n: int):
    """The character- and weight-free data of the trace formula at (N, n), gcd(n, N) = 1.

    a2: ((t, ((x, c_{t,x}), …)), …) with Σ_x c_{t,x} χ(x) = Σ_f h_w((t²−4n)/f²) μ(t, f, n);
    a3: ((min(d, n/d), φ(g), g, y_τ), …) over d | n, τ | N, g = gcd(τ, N/τ) | n/d − d.
    """
    psiN = psi(N)
    a2 = []
    t = 0
    while t * t < 4 * n:
        for tt in ((0,) if t == 0 else (t, -t)):
            D = tt * tt - 4 * n
            coef: dict[int, Fraction] = {}
            f = 1
            while f * f <= -D:
                if D % (f * f) == 0 and (D // (f * f)) % 4 in (0, 1):
                    Nf = gcd(N, f)
                    w = class_number_weighted(D // (f * f)) * Fraction(psiN, psi(N // Nf))
                    mod = N * Nf
                    for x in range(N):
                        if (x * x - tt * x + n) % mod == 0:
                            coef[x] = coef.get(x, Fraction(0)) + w
                f += 1
            a2.append((tt, tuple(sorted(coef.items()))))
        t += 1
    a3 = []
    for d in divisors(n):
        e = n // d
        for tau in divisors(N):
            g = gcd(tau, N // tau)
            if (e - d) % g:
                continue
            y = d % tau
            while (y - e) % (N // tau):
                y += tau
            a3.append((min(d, e), euler_phi(g), g, y))
    return tuple(a2), tuple(a3)


def _trace(chi: _Chi, k: int, n: int) -> Cyclotomic:
    N = chi.N
    _check_weight(k)
    if n < 1:
        raise ValueError(f"need n ≥ 1, got {n}")
    if gcd(n, N) != 1:
        raise ValueError(f"trace_hecke needs gcd(n, N) = 1, got n={n}, N={N}")
    if chi.parity != (-1) ** k:
        return Cyclotomic(chi.m)
    e = chi.e
    vec: list[Rational] = [0] * chi.m
    r = isqrt(n)
    if r * r == n:  # A1 = χ(√n) n^(k/2−1) (k−1)/12 ψ(N)
        vec[e[r % N]] += Fraction((k - 1) * psi(N) * r ** (k - 2), 12)
    a2, a3 = _geometry(N, n)
    for t, items in a2:  # A2 = −½ Σ_t P_k(t, n) Σ_f h_w μ(t, f, n)
        P = _lucas(t, n, k - 1)
        if P:
            for x, c in items:
                if e[x] >= 0:
                    vec[e[x]] -= P * c / 2
    quo = N // chi.conductor
    for mn, ph, g, y in a3:  # A3 = −½ Σ_d min(d, n/d)^(k−1) Σ_τ φ(g) χ(y_τ)
        if quo % g == 0 and e[y] >= 0:
            vec[e[y]] -= Fraction(mn ** (k - 1) * ph, 2)
    if k == 2 and chi.trivial:  # A4 = Σ_{t | n, gcd(N, n/t) = 1} t
        vec[0] += sum(t for t in divisors(n) if gcd(N, n // t) == 1)
    out = Cyclotomic(chi.m, vec)
    if not out.is_integral():
        raise ArithmeticError(f"trace formula gave a non-integral {out} for N={N} k={k} n={n}")
    return out


def trace_hecke(N: int, k: int, chi: CharacterOrbit | None, n: int, a: int = 1) -> Cyclotomic:
    """Tr T_n on S_k(Γ0(N), χ^a) for k ≥ 2 and gcd(n, N) = 1, in Q(ζ_m), m = order(χ).

    Eichler–Selberg trace formula with character ([CS] Thm 12.4.11, [Ch]):
    Tr T_n = A1 + A2 + A3 + A4 with
      A1 = χ(√n) n^(k/2−1) (k−1)/12 ψ(N)                 if n is a square, else 0;
      A2 = −½ Σ_{t² < 4n} P_k(t, n) Σ_f h_w((t²−4n)/f²) μ(t, f, n),
           P_k(t, n) = (ρ^(k−1) − ρ̄^(k−1))/(ρ − ρ̄), ρ + ρ̄ = t, ρρ̄ = n;
           f ≥ 1 with f² | t²−4n and (t²−4n)/f² ≡ 0, 1 (mod 4), N_f = gcd(N, f),
           μ(t, f, n) = ψ(N)/ψ(N/N_f) · Σ_{x mod N, x² − tx + n ≡ 0 (mod N·N_f)} χ(x);
      A3 = −½ Σ_{d | n} min(d, n/d)^(k−1) Σ_τ φ(gcd(τ, N/τ)) χ(y_τ), τ | N with
           g = gcd(τ, N/τ) dividing both N/cond(χ) and n/d − d, and y_τ (defined modulo
           N/g) ≡ d (mod τ), ≡ n/d (mod N/τ);
      A4 = Σ_{t | n, gcd(N, n/t) = 1} t                   if k = 2 and χ = 1, else 0.
    Equals σ_a of the value for χ (a = 1); 0 when χ(−1) ≠ (−1)^k.
    """
    return _trace(_as_chi(N, chi, a), k, n)


def absolute_trace(N: int, k: int, chi: CharacterOrbit | None, n: int) -> int:
    """Σ_{a ∈ (Z/m)^×} Tr(T_n | S_k(N, χ^a)) = Tr_{Q(χ)/Q} of :func:`trace_hecke` (an int)."""
    t = trace_hecke(N, k, chi, n).trace()
    assert isinstance(t, int), t
    return t


def trace_hecke_new(N: int, k: int, chi: CharacterOrbit | None, n: int,
                    a: int = 1) -> Cyclotomic:
    """Tr T_n on S_k^new(Γ0(N), χ^a), gcd(n, N) = 1: Σ_{cond | M | N} β(N/M) Tr T_n on
    S_k(M, χ^a_M)  ([Mt]: the old space from level M is σ0(N/M) copies of the new
    space at M as a module for the T_n with gcd(n, N) = 1)."""
    c = _as_chi(N, chi, a)
    out = Cyclotomic(c.m)
    for M in _levels(c):
        b = _beta(N // M)
        if b:
            out = out + b * _trace(_induce(c, M), k, n)
    return out


def absolute_trace_new(N: int, k: int, chi: CharacterOrbit | None, n: int) -> int:
    """Tr_{Q(χ)/Q} of :func:`trace_hecke_new`: the sum of a_n over the newforms of the orbit
    and all their conjugates (what a table stores per character orbit)."""
    t = trace_hecke_new(N, k, chi, n).trace()
    assert isinstance(t, int), t
    return t


def deligne_mean_square_ok(trace: Cyclotomic, dim: int, n: int, k: int) -> bool:
    """A necessary condition of Deligne's bound |σ(Tr T_n)| ≤ dim·σ0(n)·n^((k−1)/2) for all
    embeddings σ, decided exactly: Σ_σ |σ(T)|² = Tr(T·T̄) ≤ φ(m)·(dim·σ0(n))²·n^(k−1)."""
    bound2 = dim * dim * sigma0(n) ** 2 * n ** (k - 1)
    return (trace * trace.conjugate(-1)).trace() <= euler_phi(trace.m) * bound2
