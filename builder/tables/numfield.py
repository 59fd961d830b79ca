"""A small number field K = Q[x]/(f) for checking and filtering stored eigenvalues.

Independent of the engine's own field code (builder/forms/fields.py): elements
are python-flint ``fmpq_poly`` reduced mod f, traces come from the power sums of
the roots of f (Newton's identities), and real embeddings from FLINT's certified
complex root isolation (real roots come back with an exactly zero imaginary
part), refined until every comparison is decided.
"""

from __future__ import annotations

from fractions import Fraction

import flint

MAX_PREC = 4096


def parse_rational(s) -> Fraction:
    return Fraction(str(s))


class NumberField:
    """K = Q[x]/(f) for an irreducible integer polynomial f (constant term first)."""

    def __init__(self, poly: list[int]) -> None:
        if len(poly) < 2:
            raise ValueError(f"field polynomial of degree < 1: {poly}")
        self.poly = [int(c) for c in poly]
        self.degree = len(self.poly) - 1
        self.f = flint.fmpq_poly(self.poly)
        self._power_sums: list[Fraction] | None = None
        self._roots: dict[int, list] = {}
        self._totally_real: bool | None = None

    # -- elements
    def element(self, coords) -> flint.fmpq_poly:
        """The element Σ c_i α^i from power-basis coordinates (rationals or strings)."""
        cs = [parse_rational(c) for c in coords]
        if len(cs) != self.degree:
            raise ValueError(f"{len(cs)} coordinates for a field of degree {self.degree}")
        return flint.fmpq_poly([flint.fmpq(c.numerator, c.denominator) for c in cs])

    def from_int(self, n: int) -> flint.fmpq_poly:
        return flint.fmpq_poly([n])

    def mul(self, a, b):
        return (a * b) % self.f

    def sub(self, a, b):
        return a - b

    @staticmethod
    def is_zero(a) -> bool:
        return a.is_zero()

    @staticmethod
    def rational_value(a) -> Fraction | None:
        """a as a rational number if it lies in Q, else None."""
        if a.degree() <= 0:
            c = a[0] if a.degree() == 0 else flint.fmpq(0)
            return Fraction(int(c.p), int(c.q))
        return None

    # -- trace
    def power_sums(self) -> list[Fraction]:
        """s_m = Σ_j α_j^m for m = 0..d−1 (Newton's identities on the monic f/lead)."""
        if self._power_sums is None:
            d = self.degree
            lead = Fraction(self.poly[-1])
            # monic: x^d + e[d-1] x^(d-1) + ... + e[0]
            e = [Fraction(c) / lead for c in self.poly[:-1]]
            s = [Fraction(d)]
            for m in range(1, d):
                v = m * e[d - m]
                for i in range(1, m):
                    v += e[d - i] * s[m - i]
                s.append(-v)
            self._power_sums = s
        return self._power_sums

    def trace(self, a) -> Fraction:
        s = self.power_sums()
        out = Fraction(0)
        for i in range(a.degree() + 1):
            c = a[i]
            out += Fraction(int(c.p), int(c.q)) * s[i]
        return out

    # -- real embeddings
    def roots(self, prec: int = 64) -> list:
        """The d roots of f as acb balls at working precision ``prec`` (certified)."""
        if prec not in self._roots:
            old = flint.ctx.prec
            try:
                flint.ctx.prec = prec
                rts = []
                for r, m in flint.fmpz_poly(self.poly).complex_roots():
                    rts.extend([r] * m)
            finally:
                flint.ctx.prec = old
            self._roots[prec] = rts
        return self._roots[prec]

    def is_totally_real(self) -> bool:
        if self._totally_real is None:
            rts = self.roots()
            self._totally_real = len(rts) == self.degree and all(r.imag.is_zero() for r in rts)
        return self._totally_real

    def embeddings(self, a, prec: int):
        """σ_j(a) for each real root α_j (arb balls); requires a totally real field."""
        old = flint.ctx.prec
        try:
            flint.ctx.prec = prec
            out = []
            coeffs = [a[i] for i in range(a.degree() + 1)]
            for r in self.roots(prec):
                x = r.real
                v = flint.arb(0)
                for c in reversed(coeffs):
                    v = v * x + flint.arb(c)
                out.append(v)
            return out
        finally:
            flint.ctx.prec = old

    def _decide(self, a, certain_in, certain_out, exact_edge) -> bool:
        """Whether every real embedding of a satisfies a closed condition.

        ``certain_in(v)``/``certain_out(v)`` decide a ball; an undecided ball at
        every precision up to MAX_PREC can only be an embedding on the boundary,
        which ``exact_edge()`` decides exactly in K.
        """
        prec = 64
        while True:
            vals = self.embeddings(a, prec)
            if any(certain_out(v) for v in vals):
                return False
            if all(certain_in(v) for v in vals):
                return True
            if prec >= MAX_PREC:
                return exact_edge()
            prec *= 4

    def all_abs_le(self, a, bound_sq: int) -> bool:
        """Every real embedding σ satisfies σ(a)² ≤ bound_sq (exact decision)."""
        sq = self.mul(a, a)
        q = self.rational_value(sq)
        if q is not None:
            return q <= bound_sq
        # a² ∉ Q: no embedding of a² equals the integer bound, so refinement terminates
        B2 = flint.arb(bound_sq)
        return self._decide(a, lambda v: v * v <= B2, lambda v: v * v > B2, lambda: False)

    def all_in_interval(self, a, lo: Fraction | None, hi: Fraction | None) -> bool:
        """Every real embedding of a lies in [lo, hi] (None = unbounded); exact."""
        lo = None if lo is None else Fraction(str(lo))
        hi = None if hi is None else Fraction(str(hi))
        q = self.rational_value(a)
        if q is not None:
            return (lo is None or q >= lo) and (hi is None or q <= hi)
        # a ∉ Q: no embedding equals a rational bound, so refinement terminates

        def arb_of(x: Fraction):
            return flint.arb(flint.fmpq(x.numerator, x.denominator))

        def inside(v):
            return (lo is None or v >= arb_of(lo)) and (hi is None or v <= arb_of(hi))

        def outside(v):
            return (lo is not None and v < arb_of(lo)) or (hi is not None and v > arb_of(hi))

        return self._decide(a, inside, outside, lambda: False)
