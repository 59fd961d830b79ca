"""Independent helpers for the newform tests (test_newspace, test_eigen, test_fields, test_unit).

Nothing here imports from ``builder``: the identities are checked on the plain record values
(lists of ints, fraction strings) with our own arithmetic, using only python-flint (number
field arithmetic, root isolation) and sympy (a second, independent real-root count).

Sources
-------
[AL]  A. O. L. Atkin, J. Lehner, *Hecke operators on Γ0(m)*, Math. Ann. 185 (1970): Thm 3
      (a_p = −p^(k/2−1) ε_p for p ∥ N, a_p = 0 for p² | N), and the functional equation with
      sign (−1)^(k/2) ε_N (also [St] §9.4, [DS] §5.8–5.9).
[De]  P. Deligne, *La conjecture de Weil I*, Publ. IHES 43 (1974): |σ(a_p)| ≤ 2 p^((k−1)/2) for
      every embedding σ; hence |a_n| ≤ σ0(n) n^((k−1)/2) and |Tr a_n| ≤ d σ0(n) n^((k−1)/2).
[DS]  F. Diamond, J. Shurman, *A First Course in Modular Forms*, GTM 228 (theorem numbers from
      memory): Prop. 5.8.5 (a normalised eigenform has a_1 = 1, a_mn = a_m a_n for coprime m, n,
      a_{p^(r+1)} = a_p a_{p^r} − p^(k−1) a_{p^(r−1)} for p ∤ N and a_{p^r} = a_p^r for p | N);
      Thm 5.5.3 (T_n, gcd(n, N) = 1, is normal — self-adjoint for trivial character — for the
      Petersson product, so its eigenvalues are real) and §6.5 (they are algebraic integers):
      with a_p ∈ {0, ±p^(k/2−1)} for p | N, the coefficient field is totally real.
[Ri]  K. Ribet, *Galois representations attached to eigenforms with Nebentypus*, LNM 601 (1977),
      §3 (from memory): f has CM by the character χ_D when a_p = χ_D(p) a_p for almost all p,
      so a_p = 0 for every prime p ∤ N inert in Q(√D).
[Co]  H. Cohen, GTM 138, §1.4.2 (Kronecker symbol), §4.3.2 (Newton's power sums, traces).
[Si]  J. Silverman, *The Arithmetic of Elliptic Curves*, III.1 (discriminant) and V.1 / the
      standard count #E(F_p) = p + 1 − a_p with a Legendre symbol per x (common practice).
"""

from __future__ import annotations

from fractions import Fraction
from functools import cache
from math import gcd, isqrt

import flint

# ----------------------------------------------------------------------------------------------
# elementary arithmetic (own copies)
# ----------------------------------------------------------------------------------------------


def factorize(n: int) -> dict[int, int]:
    """{p: e} by trial division."""
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


def primes_upto(B: int) -> list[int]:
    """Primes p ≤ B."""
    return [p for p in range(2, B + 1) if all(p % q for q in range(2, isqrt(p) + 1))]


def sigma0(n: int) -> int:
    """Number of divisors of n."""
    out = 1
    for e in factorize(n).values():
        out *= e + 1
    return out


def kronecker(D: int, n: int) -> int:
    """Kronecker symbol (D/n) for a discriminant D ≡ 0, 1 (mod 4) and n ≥ 1 ([Co] §1.4.2)."""
    out = 1
    for p, e in factorize(n).items():
        if p == 2:
            s = 0 if D % 2 == 0 else (1 if D % 8 in (1, 7) else -1)
        else:
            r = D % p
            s = 0 if r == 0 else (1 if pow(r, (p - 1) // 2, p) == 1 else -1)
        out *= s**e
    return out


def is_fundamental_discriminant(D: int) -> bool:
    """D ≡ 1 (mod 4) squarefree, or D = 4m with m ≡ 2, 3 (mod 4) squarefree (common practice)."""

    def squarefree(m: int) -> bool:
        return all(e == 1 for e in factorize(abs(m)).values())

    if D % 4 == 1:
        return squarefree(D)
    return D % 4 == 0 and (D // 4) % 4 in (2, 3) and squarefree(D // 4)


# ----------------------------------------------------------------------------------------------
# [Cr] Table 1 curves and point counts
# ----------------------------------------------------------------------------------------------

#: Optimal curves of some isogeny classes, [a1, a2, a3, a4, a6] — from memory of J. Cremona,
#: *Algorithms for Modular Elliptic Curves*, 2nd ed., Table 1, with the ranks of its Table 1
#: (11a1 and 37b1 rank 0, 37a1 rank 1, 389a1 rank 2), and their L(E,1)/Ω_E from the
#: Birch–Swinnerton-Dyer data of the same tables (from memory): 11a1: c_11 = 5, |E(Q)_tors| = 5,
#: Sha = 1 so L/Ω = 5/25 = 1/5; 37b1: c_37 = 3, |E(Q)_tors| = 3, so L/Ω = 3/9 = 1/3.
CURVES: dict[str, dict] = {
    # y² + y = x³ − x² − 10x − 20
    "11a1": {"ainv": (0, -1, 1, -10, -20), "N": 11, "rank": 0, "L_over_omega": Fraction(1, 5)},
    # y² + y = x³ − x
    "37a1": {"ainv": (0, 0, 1, -1, 0), "N": 37, "rank": 1, "L_over_omega": Fraction(0)},
    # y² + y = x³ + x² − 23x − 50
    "37b1": {"ainv": (0, 1, 1, -23, -50), "N": 37, "rank": 0, "L_over_omega": Fraction(1, 3)},
    # y² + y = x³ + x² − 2x
    "389a1": {"ainv": (0, 1, 1, -2, 0), "N": 389, "rank": 2, "L_over_omega": Fraction(0)},
}


def curve_discriminant(ainv: tuple[int, int, int, int, int]) -> int:
    """Δ of y² + a1xy + a3y = x³ + a2x² + a4x + a6 ([Si] III.1)."""
    a1, a2, a3, a4, a6 = ainv
    b2 = a1 * a1 + 4 * a2
    b4 = 2 * a4 + a1 * a3
    b6 = a3 * a3 + 4 * a6
    b8 = a1 * a1 * a6 + 4 * a2 * a6 - a1 * a3 * a4 + a2 * a3 * a3 - a4 * a4
    return -b2 * b2 * b8 - 8 * b4**3 - 27 * b6 * b6 + 9 * b2 * b4 * b6


def curve_ap(ainv: tuple[int, int, int, int, int], p: int) -> int:
    """a_p = p + 1 − #E(F_p), counting the points over F_p ourselves.

    p = 2: every (x, y) is tried.  p odd: completing the square, y² + (a1x + a3)y = r(x) has
    1 + ((a1x + a3)² + 4r(x) / p) solutions in y (Legendre symbol by Euler's criterion).
    """
    a1, a2, a3, a4, a6 = ainv
    count = 1  # the point at infinity
    if p == 2:
        for x in range(2):
            for y in range(2):
                lhs = y * y + a1 * x * y + a3 * y
                if (lhs - (x**3 + a2 * x * x + a4 * x + a6)) % 2 == 0:
                    count += 1
        return p + 1 - count
    for x in range(p):
        r = (x * x * x + a2 * x * x + a4 * x + a6) % p
        disc = ((a1 * x + a3) ** 2 + 4 * r) % p
        if disc == 0:
            count += 1
        elif pow(disc, (p - 1) // 2, p) == 1:
            count += 2
    return p + 1 - count


# ----------------------------------------------------------------------------------------------
# number fields: Q[x]/(g), g = field_poly (constant term first)
# ----------------------------------------------------------------------------------------------


def power_sums(g: list[int], m: int) -> list[int]:
    """Newton power sums s_0..s_m of the roots of the monic g ([Co] §4.3.2 / Newton's identities).

    With g = x^d + c_{d−1}x^{d−1} + … + c_0:  s_j = −(j c_{d−j} + Σ_{i=1}^{j−1} c_{d−i} s_{j−i})
    for j ≤ d and s_j = −Σ_{i=1}^{d} c_{d−i} s_{j−i} for j > d.
    """
    d = len(g) - 1
    assert g[-1] == 1
    c = {i: g[d - i] for i in range(1, d + 1)}  # c[i] = coefficient of x^{d−i}
    s = [d]
    for j in range(1, m + 1):
        acc = sum(c[i] * s[j - i] for i in range(1, min(j - 1, d) + 1))
        if j <= d:
            acc += j * c[j]
        s.append(-acc)
    return s


class Field:
    """K = Q[x]/(g) with elements as flint.fmpq_poly reduced modulo g."""

    def __init__(self, g: list[int]) -> None:
        self.coeffs = list(g)
        self.d = len(g) - 1
        self.g = flint.fmpq_poly(g)
        self.s = power_sums(g, max(self.d - 1, 0))

    def elt(self, coords) -> flint.fmpq_poly:
        return (
            flint.fmpq_poly(
                [flint.fmpq(Fraction(c).numerator, Fraction(c).denominator) for c in coords]
            )
            % self.g
        )

    def mul(self, a, b):
        return (a * b) % self.g

    def coords(self, a) -> list[Fraction]:
        c = [Fraction(int(x.p), int(x.q)) for x in a.coeffs()]
        return c + [Fraction(0)] * (self.d - len(c))

    def trace(self, a) -> Fraction:
        return sum((ci * self.s[i] for i, ci in enumerate(self.coords(a))), Fraction(0))

    def charpoly(self, a) -> list[int]:
        """Characteristic polynomial of multiplication by a (constant term first)."""
        M = flint.fmpq_mat(self.d, self.d)
        xi = self.elt([1])
        x = self.elt([0, 1]) if self.d > 1 else self.elt([0])
        for i in range(self.d):
            row = self.coords(self.mul(a, xi))
            for j in range(self.d):
                M[i, j] = flint.fmpq(row[j].numerator, row[j].denominator)
            xi = self.mul(xi, x)
        cp = M.charpoly()
        out = []
        for c in cp.coeffs():
            assert c.q == 1, "characteristic polynomial of an algebraic integer"
            out.append(int(c.p))
        return out


@cache
def real_embeddings(g: tuple[int, ...], prec: int = 256) -> tuple:
    """The roots of g as arb balls, after proving that all d of them are real.

    Two independent counts: sympy's Sturm-sequence count of real roots, and python-flint's
    certified complex root isolation (roots whose imaginary part is exactly 0).
    """
    import sympy

    d = len(g) - 1
    x = sympy.Symbol("x")
    poly = sympy.Poly(list(reversed(g)), x)
    n_real_sturm = poly.count_roots()
    old = flint.ctx.prec
    flint.ctx.prec = prec
    try:
        roots = flint.fmpz_poly(list(g)).complex_roots()
    finally:
        flint.ctx.prec = old
    assert sum(m for _, m in roots) == d
    assert all(m == 1 for _, m in roots), "field polynomial must be squarefree"
    reals = [r.real for r, _ in roots if r.imag == 0]
    return n_real_sturm, tuple(reals)


def evaluate(coords: list[Fraction], root, prec: int = 256) -> object:
    """Σ c_i root^i as an arb (computed with ``prec`` bits)."""
    old = flint.ctx.prec
    flint.ctx.prec = prec
    try:
        acc = flint.arb(0)
        pw = flint.arb(1)
        for c in coords:
            acc += pw * flint.arb(flint.fmpq(c.numerator, c.denominator))
            pw *= root
        return acc
    finally:
        flint.ctx.prec = old


# ----------------------------------------------------------------------------------------------
# the identities every record must satisfy
# ----------------------------------------------------------------------------------------------


def _frac(s: str) -> Fraction:
    return Fraction(s)


def exact_an_from_ap(K: Field, ap: dict[int, list[str]], N: int, k: int, B: int) -> dict:
    """a_n ∈ K for n ≤ B built from the record's exact a_p by [DS] Prop. 5.8.5.

    Returns {n: a_n} for the n ≤ B all of whose primes have an exact a_p in the record.
    """
    a = {1: K.elt([1])}
    for p in sorted(ap):
        if p > B:
            continue
        x = K.elt([_frac(c) for c in ap[p]])
        prev2, prev, q = K.elt([1]), x, p
        a[p] = x
        while q * p <= B:
            nxt = K.mul(x, prev) if N % p == 0 else K.mul(x, prev) - prev2 * (p ** (k - 1))
            prev2, prev = prev, nxt
            q *= p
            a[q] = nxt
    for n in range(2, B + 1):
        f = factorize(n)
        if len(f) < 2 or not all(p in ap for p in f):
            continue
        val = K.elt([1])
        for p, e in f.items():
            val = K.mul(val, a[p**e])
        a[n] = val
    return a


def check_record_identities(R) -> None:
    """Assert every identity a newform record must satisfy (sources beside each check)."""
    N, k = R.level, R.weight
    B = R.params["trace_bound"]
    assert R.num_orbits == len(R.newforms)
    # Σ d over orbits = dim new (the orbits are a decomposition of the new subspace)
    assert sum(f.dim for f in R.newforms) == R.dim_new
    assert R.dim_old == R.dim_cusp - R.dim_new
    bad = factorize(N)
    primes = primes_upto(B)
    order_keys = []
    for i, f in enumerate(R.newforms, start=1):
        d = f.dim
        # our labels and numbering (design.md §4)
        assert f.orbit == i and f.label == f"{N}w{k}-{i}"
        order_keys.append((d, [f.traces[p - 1] for p in primes]))
        assert len(f.traces) == B
        # a_1 = 1, so Tr a_1 = d  [DS] Prop. 5.8.5 (normalised eigenform)
        assert f.traces[0] == d
        # |Tr a_n| ≤ d σ0(n) n^((k−1)/2)  [De] (squared, in integers)
        for n in range(1, B + 1):
            assert f.traces[n - 1] ** 2 <= (d * sigma0(n)) ** 2 * n ** (k - 1), (f.label, n)
        # Atkin–Lehner signs for every p | N, Fricke sign = their product (W_N = ∏ W_{p^e})
        assert sorted(f.atkin_lehner) == sorted(bad)
        assert all(v in (1, -1) for v in f.atkin_lehner.values())
        prod = 1
        for v in f.atkin_lehner.values():
            prod *= v
        assert f.fricke_sign == prod
        # sign of the functional equation = (−1)^(k/2) ε_N  [AL], [St] §9.4
        assert f.root_number == (-1) ** (k // 2) * f.fricke_sign
        # root number −1 forces L(f, k/2) = 0 (functional equation)
        if f.root_number == -1:
            assert f.lvalue_zero is True, f.label
        if k == 2:
            assert isinstance(f.lvalue_zero, bool)
            if d == 1:
                # L(f,1)/Ω⁺ is 0 exactly when L(f,1) = 0
                assert f.l_ratio is not None and Fraction(f.l_ratio) >= 0
                assert (Fraction(f.l_ratio) == 0) == f.lvalue_zero, f.label
        # a_p = −p^(k/2−1) ε_p for p ∥ N, a_p = 0 for p² | N  [AL] Thm 3
        for p, e in bad.items():
            want = -(p ** (k // 2 - 1)) * f.atkin_lehner[p] if e == 1 else 0
            if p <= B:
                assert f.traces[p - 1] == d * want, (f.label, p)
            if f.ap is not None and p in f.ap:
                assert [_frac(c) for c in f.ap[p]] == [Fraction(want)] + [Fraction(0)] * (d - 1)
        # rational orbits: traces are the a_n; multiplicativity and Hecke recursion [DS] 5.8.5
        if d == 1:
            a = [None] + list(f.traces)
            for m in range(2, B + 1):
                for n in range(2, B // m + 1):
                    if gcd(m, n) == 1:
                        assert a[m * n] == a[m] * a[n], (f.label, m, n)
            for p in primes:
                q = p
                while q * p <= B:
                    if N % p:
                        assert a[q * p] == a[p] * a[q] - p ** (k - 1) * a[q // p], (f.label, q * p)
                    else:
                        assert a[q * p] == a[p] * a[q], (f.label, q * p)
                    q *= p
        _check_field(R, f, B)
        # CM by D: a_p = 0 for every prime p ∤ N inert in Q(√D)  [Ri] §3
        if f.is_cm:
            D = f.cm_disc
            assert D is not None and D < 0 and is_fundamental_discriminant(D)
            for p in primes:
                if N % p and kronecker(D, p) == -1:
                    assert f.traces[p - 1] == 0, (f.label, D, p)
        else:
            assert f.cm_disc is None
    # orbit order: (dim, Tr a_p for p = 2, 3, 5, … as integers)  design.md §4
    assert order_keys == sorted(order_keys)


def _check_field(R, f, B: int) -> None:
    """Field polynomial, exact a_p, Deligne in every real embedding, recursion via Tr."""
    N, k, d = R.level, R.weight, f.dim
    g = f.field_poly
    assert len(g) == d + 1 and g[-1] == 1
    if d > 1:
        fz = flint.fmpz_poly(g)
        # irreducible over Q (it defines the coefficient field)
        _, facs = fz.factor()
        assert len(facs) == 1 and facs[0][1] == 1
        # the discriminant is kept up to dim_cap (schema/README.md: NULL above it)
        want = str(int(fz.discriminant())) if d <= R.params["dim_cap"] else None
        assert f.field_disc == want
    # totally real: [DS] Thm 5.5.3 + §6.5 — d real roots, counted twice
    n_sturm, reals = real_embeddings(tuple(g))
    assert n_sturm == d and len(reals) == d, (f.label, g)
    if f.ap is None:
        assert d > R.params["dim_cap"]
        return
    assert d <= R.params["dim_cap"]
    ap_bound = R.params["ap_bound"]
    assert sorted(f.ap) == primes_upto(ap_bound)
    K = Field(g)
    for p, c in f.ap.items():
        assert len(c) == d
        x = K.elt([_frac(s) for s in c])
        # a_p is an algebraic integer with Tr a_p = traces[p − 1]
        cp = K.charpoly(x)
        if p <= B:
            assert K.trace(x) == f.traces[p - 1], (f.label, p)
        if p == _first_good_prime(N) and f.hecke_poly_2 is not None:
            assert cp == f.hecke_poly_2, (f.label, p)
        # Deligne: |σ(a_p)|² ≤ 4 p^(k−1) in every real embedding σ  [De]
        if N % p:
            coords = [_frac(s) for s in c]
            for r in reals:
                v = evaluate(coords, r)
                assert v * v <= 4 * p ** (k - 1), (f.label, p, v)
    # exact a_n from exact a_p: a_1 = 1, Hecke recursion at p^r, multiplicativity; their
    # traces are the record's traces  [DS] Prop. 5.8.5
    an = exact_an_from_ap(K, f.ap, N, k, B)
    for n, x in an.items():
        assert K.trace(x) == f.traces[n - 1], (f.label, n)
    # Hecke recursion through traces: Tr a_{p²} = Tr(a_p²) − d p^(k−1) for p ∤ N
    for p in f.ap:
        if p * p <= B:
            x = K.elt([_frac(s) for s in f.ap[p]])
            want = K.trace(K.mul(x, x)) - (d * p ** (k - 1) if N % p else 0)
            assert f.traces[p * p - 1] == want, (f.label, p)


def _first_good_prime(N: int) -> int:
    p = 2
    while N % p == 0 or any(p % q == 0 for q in range(2, p)):
        p += 1
    return p
