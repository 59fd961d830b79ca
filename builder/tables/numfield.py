"""A small number field K = Q[x]/(f) for checking and filtering stored eigenvalues.

Independent of the engine's own field code (builder/forms/fields.py): elements
are python-flint ``fmpq_poly`` reduced mod f, traces come from the power sums of
the roots of f (Newton's identities), and real embeddings from FLINT's certified
complex root isolation (real roots come back with an exactly zero imaginary
part), refined until every comparison is decided.

Coefficient fields with a nontrivial character are CM fields (or totally real): for
them ``conjugation`` finds complex conjugation ι as an automorphism of K, exactly
(candidate from certified balls, then proved: f(ι(α)) = 0 in K and σ(ι(α)) is the
conjugate root in every embedding σ), so that |σ(a)|² = σ(a·ι(a)) turns bounds and
equalities on absolute values into exact statements in K (``abs_sq``, ``all_abs_sq_le``).
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
        self._conj = False  # ι(α) once computed (None: K is neither totally real nor CM)

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

    # -- complex embeddings, complex conjugation (CM fields), |σ(a)|²
    def inverse(self, a):
        """a⁻¹ in K (a ≠ 0), by the extended Euclidean algorithm in Q[x]."""
        if a.is_zero():
            raise ZeroDivisionError("inverse of 0 in a number field")
        g, s, _ = a.xgcd(self.f)
        return (s / g) % self.f  # g is a nonzero constant: f is irreducible

    def power(self, a, e: int):
        """a^e in K (e ≥ 0), by repeated squaring."""
        out, base = flint.fmpq_poly([1]), a % self.f
        while e:
            if e & 1:
                out = self.mul(out, base)
            base = self.mul(base, base)
            e >>= 1
        return out

    def compose(self, a, h):
        """a(h) in K: the image of a under α ↦ h (Horner, reduced mod f)."""
        out = flint.fmpq_poly([])
        for i in range(a.degree(), -1, -1):
            out = (out * h + a[i]) % self.f
        return out

    def _eval(self, a, z):
        """a(z) for a complex ball z (Horner; coefficients exact rationals)."""
        v = flint.acb(0)
        for i in range(a.degree(), -1, -1):
            v = v * z + flint.acb(flint.arb(a[i]))
        return v

    def complex_embeddings(self, a, prec: int) -> list:
        """σ_j(a) for every root α_j of f (acb balls), in the order of ``roots(prec)``."""
        old = flint.ctx.prec
        try:
            flint.ctx.prec = prec
            return [self._eval(a, r) for r in self.roots(prec)]
        finally:
            flint.ctx.prec = old

    def conjugation(self):
        """ι(α) ∈ K for the automorphism ι of K with σ∘ι = complex conjugation∘σ for every
        complex embedding σ, or None if there is none.

        Such an ι exists exactly when K is totally real (ι = id) or a CM field (ι is then
        complex conjugation, the same automorphism in every embedding, with a totally real
        fixed field of index 2).  Found exactly: with β = cα (c the leading coefficient of
        f) a root of the monic integral g(y) = c^(d−1)·f(y/c), ι(β) is an algebraic integer,
        so z = g'(β)·ι(β) lies in Z[β] (O_K ⊂ g'(β)⁻¹Z[β], Euler), and its coordinates are
        z_i = Σ_j conj(β_j)·B_i(β_j), g(x)/(x − β) = Σ_i B_i(β)x^i (the trace-dual basis
        of the β^i is B_i(β)/g'(β)).  Certified balls round them to integers; the candidate
        h is accepted only after the exact check f(h(α)) = 0 in K (so each σ_j(h(α)) is a
        root of f) and the certified check that σ_j(h(α)) is the root conj(α_j).
        """
        if self._conj is not False:
            return self._conj
        self._conj = self._find_conjugation()
        return self._conj

    def _find_conjugation(self):
        x = flint.fmpq_poly([0, 1])
        if self.degree == 1 or self.is_totally_real():
            return x
        d, c = self.degree, self.poly[-1]
        g = [self.poly[t] * c ** (d - 1 - t) for t in range(d)] + [1]
        ints = None
        prec = 64
        while ints is None:
            old = flint.ctx.prec
            try:
                flint.ctx.prec = prec
                betas = [r * c for r in self.roots(prec)]
                ints = []
                for i in range(d):
                    s = flint.acb(0)
                    for b in betas:
                        Bi = flint.acb(0)
                        for t in range(d, i, -1):  # Σ_{t>i} g_t b^(t−1−i), Horner
                            Bi = Bi * b + g[t]
                        s += b.conjugate() * Bi
                    re = s.real
                    if not re.contains_integer():
                        return None  # no integral z: no such automorphism
                    u = re.unique_fmpz()
                    if u is None:
                        ints = None
                        break
                    ints.append(int(u))
            finally:
                flint.ctx.prec = old
            if ints is None:
                if prec >= MAX_PREC:
                    return None
                prec *= 4
        G = flint.fmpq_poly(g)
        gp = G.derivative()
        gg, s, _ = gp.xgcd(G)
        P = (flint.fmpq_poly(ints) * (s / gg)) % G  # ι(β) as a polynomial in β
        h = flint.fmpq_poly([P[i] * c**i for i in range(P.degree() + 1)]) / c  # ι(α) = ι(β)/c
        if not self.compose(flint.fmpq_poly(self.poly), h).is_zero():
            return None
        prec = 64
        while True:
            rts = self.roots(prec)
            vals = self.complex_embeddings(h, prec)
            decided = True
            for j, v in enumerate(vals):
                hit = [m for m, r in enumerate(rts) if v.overlaps(r)]
                cj = rts[j].conjugate()
                want = [m for m, r in enumerate(rts) if cj.overlaps(r)]
                if len(hit) != 1 or len(want) != 1:
                    decided = False
                    break
                if hit != want:
                    return None  # an automorphism, but not complex conjugation
            if decided:
                return h
            if prec >= MAX_PREC:
                return None
            prec *= 4

    def conj(self, a):
        """ι(a) (see ``conjugation``; requires K totally real or CM)."""
        h = self.conjugation()
        if h is None:
            raise ValueError("K is neither totally real nor CM: no complex conjugation")
        return self.compose(a, h)

    def abs_sq(self, a):
        """a·ι(a) ∈ K: σ(a·ι(a)) = |σ(a)|² for every complex embedding σ (K TR or CM)."""
        return self.mul(a, self.conj(a))

    def all_abs_sq_le(self, a, bound_sq: int) -> bool:
        """|σ(a)|² ≤ bound_sq for every complex embedding σ (exact; K totally real or CM)."""
        n = self.abs_sq(a)
        q = self.rational_value(n)
        if q is not None:
            return q <= bound_sq
        # n ∉ Q: σ(n) = bound_sq would give n = bound_sq, so refinement terminates
        B = flint.arb(bound_sq)
        prec = 64
        while True:
            vals = [v.real for v in self.complex_embeddings(n, prec)]
            if any(v > B for v in vals):
                return False
            if all(v <= B for v in vals):
                return True
            if prec >= MAX_PREC:
                return False
            prec *= 4
