"""Coefficient fields K = Q[x]/(f): arithmetic, traces, and the canonical polynomial.

Elements are fmpq_poly of degree < deg f (power-basis coordinates).

Canonical defining polynomial (our rule, after [Co] §4.4 "polynomial
reduction"): take the Z-module O spanned by the given algebra integers
(a_n for n up to a bound, or the powers of one generator), put it in Hermite
normal form, LLL-reduce it for T2(x) = Tr(x·x̄) — the trace form Tr(xy) when K
is totally real (trivial character), with complex conjugation x ↦ x̄ when K is
a CM field (forms with a character) — an exact integral positive definite
form, and among the reduced basis vectors, their pairwise sums
and differences, keep those whose minimal polynomial has degree d = [K:Q].
Among those polynomials choose: smallest max |coefficient|, then smallest
sum of |coefficients|, then the coefficient list (constant term first)
compared lexicographically.  Since x ↦ −x maps generators to generators, both
signs are always candidates.  The result is a deterministic function of the
form: O is spanned by its a_n, written in the power basis of α, the T_q
eigenvalue of the orbit's (canonical) splitting prime.  Known gap: an LLL
basis is not unique, so the choice can differ for another presentation of
the same order (tests/test_fields.py records this as an expected failure);
a canonical enumeration of short vectors would close it.
"""

from __future__ import annotations

import flint


class NumberField:
    """K = Q[x]/(f) for a monic irreducible f ∈ Z[x]."""

    def __init__(self, f: flint.fmpz_poly) -> None:
        self.f = flint.fmpq_poly(list(f.coeffs()))
        self.fz = f
        self.d = f.degree()
        self._power_traces = _power_sums(f, 2 * self.d)

    def elt(self, coords) -> flint.fmpq_poly:
        return flint.fmpq_poly(list(coords)) % self.f

    def gen(self) -> flint.fmpq_poly:
        return self.elt([0, 1]) if self.d > 1 else self.elt([0])

    def mul(self, a, b) -> flint.fmpq_poly:
        return (a * b) % self.f

    def inv(self, a) -> flint.fmpq_poly:
        g, s, _ = a.xgcd(self.f)
        if g.degree() != 0:
            raise ZeroDivisionError("element is not invertible in K")
        return (s / g) % self.f

    def coords(self, a) -> list[flint.fmpq]:
        c = list(a.coeffs())
        return [flint.fmpq(x) for x in c] + [flint.fmpq(0)] * (self.d - len(c))

    def trace(self, a) -> flint.fmpq:
        return sum((c * self._power_traces[i] for i, c in enumerate(self.coords(a))), flint.fmpq(0))

    def mult_matrix(self, a) -> flint.fmpq_mat:
        """Matrix of y ↦ a·y on the power basis (rows = images of x^i)."""
        M = flint.fmpq_mat(self.d, self.d)
        xi = self.elt([1])
        x = self.elt([0, 1])
        for i in range(self.d):
            row = self.coords(self.mul(a, xi))
            for j in range(self.d):
                M[i, j] = row[j]
            xi = self.mul(xi, x)
        return M

    def charpoly(self, a) -> flint.fmpq_poly:
        return self.mult_matrix(a).charpoly()

    def is_generator(self, a) -> bool:
        cp = flint.fmpz_poly([int(c) for c in self.charpoly(a).coeffs()])
        return cp.gcd(cp.derivative()).degree() == 0

    def embeddings(self) -> list:
        """The real embeddings of K: the roots of f as arb balls (K is totally real).

        Raises ArithmeticError if some root is not real.
        """
        out = []
        for r, _mult in self.fz.complex_roots():
            if not r.imag.contains(0):
                raise ArithmeticError("field polynomial has a non-real root")
            out.append(r.real)
        return sorted(out, key=lambda x: float(x.mid()))


def _power_sums(f: flint.fmpz_poly, m: int) -> list[int]:
    """Newton power sums p_0..p_m of the roots of monic f."""
    c = [int(x) for x in f.coeffs()]
    d = len(c) - 1
    e = [(-1) ** i * c[d - i] for i in range(d + 1)]  # elementary symmetric
    p = [d]
    for k in range(1, m + 1):
        s = 0
        for i in range(1, min(k, d) + 1):
            s += (-1) ** (i - 1) * e[i] * (p[k - i] if k != i else 0)
        if k <= d:
            s += (-1) ** (k - 1) * k * e[k]
        p.append(s)
    return p


def _int_poly(q: flint.fmpq_poly) -> flint.fmpz_poly:
    return flint.fmpz_poly([int(c) for c in q.coeffs()])


def _key(poly: list[int]) -> tuple:
    return (max(abs(c) for c in poly), sum(abs(c) for c in poly), poly)


def canonical_polynomial(K: NumberField, elements: list,
                         conj: flint.fmpq_mat | None = None
                         ) -> tuple[flint.fmpz_poly, flint.fmpq_poly]:
    """(g, β): the canonical defining polynomial and the generator β ∈ K it is of.

    ``elements`` must span a Z-module of rank d made of algebraic integers
    (e.g. Hecke eigenvalues); see the module docstring for the rule.  LLL reduces the
    module for T2(x) = Σ_σ |σ(x)|² = Tr_{K/Q}(x·x̄) ([Co] §4.4.2), exactly: ``conj`` is the
    matrix of complex conjugation on power-basis coordinates (rows), for a CM field
    (forms with a character); None means the identity — K totally real, where T2 is the
    trace form Tr(xy).
    """
    d = K.d
    if d == 1:
        return flint.fmpz_poly([0, 1]), K.elt([0])
    basis = _hnf_basis(K, elements)
    G = _t2_gram(K, basis, conj)
    _, U = _lll_gram(G)
    reduced = []
    for i in range(d):
        e = K.elt([0])
        for j in range(d):
            if U[i, j] != 0:
                e = e + basis[j] * int(U[i, j])
        reduced.append(e)
    best = _best_generator(K, reduced)
    if best is None:
        pairs = []
        for i in range(d):
            for j in range(i + 1, d):
                pairs += [reduced[i] + reduced[j], reduced[i] - reduced[j]]
        best = _best_generator(K, pairs)
    if best is None:
        raise ArithmeticError("no generator of K among the reduced elements")
    return best[1], best[2]


def _t2_gram(K: NumberField, basis: list, conj: flint.fmpq_mat | None) -> flint.fmpz_mat:
    """Gram matrix Tr(b_i·conj(b_j)) — integers, the b_i being algebraic integers."""
    d = K.d
    if conj is None:
        bars = basis
    else:
        bars = []
        for b in basis:
            row = flint.fmpq_mat(1, d, K.coords(b)) * conj
            bars.append(K.elt([row[0, j] for j in range(d)]))
    G = flint.fmpz_mat(d, d)
    for i in range(d):
        for j in range(d):
            t = K.trace(K.mul(basis[i], bars[j]))
            if t.q != 1:
                raise ArithmeticError("T2 Gram entry is not an integer")
            G[i, j] = int(t.p)
    return G


def _best_generator(K: NumberField, cands: list):
    """Smallest (by the documented key) minimal polynomial of degree d among ±cands."""
    best = None
    for e in cands:
        g = _int_poly(K.charpoly(e))
        if g.gcd(g.derivative()).degree() != 0:
            continue
        for s in (1, -1):
            gs = g if s == 1 else flint.fmpz_poly(
                [c * (-1) ** (i + K.d) for i, c in enumerate(g.coeffs())]
            )
            key = _key([int(c) for c in gs.coeffs()])
            if best is None or key < best[0]:
                best = (key, gs, e * s)
    return best


def _hnf_basis(K: NumberField, elements: list) -> list:
    """A Z-basis (HNF) of the module spanned by the elements."""
    rows = [K.coords(e) for e in elements]
    den = 1
    for r in rows:
        for c in r:
            den = den * int(c.q) // _gcd(den, int(c.q))
    Z = flint.fmpz_mat(len(rows), K.d)
    for i, r in enumerate(rows):
        for j, c in enumerate(r):
            Z[i, j] = int(c * den)
    H = Z.hnf()
    basis = []
    for i in range(H.nrows()):
        row = [H[i, j] for j in range(K.d)]
        if any(x != 0 for x in row):
            basis.append(K.elt([flint.fmpq(x, den) for x in row]))
    if len(basis) != K.d:
        raise ArithmeticError(f"the elements span rank {len(basis)} < {K.d}")
    return basis


def _lll_gram(G: flint.fmpz_mat):
    return G.lll(transform=True, rep="gram")


def _gcd(a: int, b: int) -> int:
    while b:
        a, b = b, a % b
    return abs(a)


def change_basis_matrix(K: NumberField, beta) -> flint.fmpq_mat:
    """Matrix P with (coords in β-power basis) = (coords in x-power basis)·P."""
    B = flint.fmpq_mat(K.d, K.d)
    p = K.elt([1])
    for i in range(K.d):
        row = K.coords(p)
        for j in range(K.d):
            B[i, j] = row[j]
        p = K.mul(p, beta)
    return B.inv()
