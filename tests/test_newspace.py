"""The new subspace and its splitting into Galois orbits (builder.forms.newspace).

Sources: [Mt] G. Martin, J. Number Theory 112 (2005), dim S_k^new(Γ0(N)) = Σ_{M|N} β(N/M)
dim S_k(Γ0(M)); [DS] Diamond–Shurman Thm 3.5.1 (dim S_k(Γ0(N))); [AL] Atkin–Lehner, Math.
Ann. 185 (1970) (S_k = ⊕_{M|N} ⊕_{t | N/M} f(tz), multiplicity one on the new subspace, W_Q
commute with T_n); [Su] Sturm's bound.  The formulas are the independent ones of tests/oracles.py.

Cost: weight 2 up to N = 500 is cheap; weights 8–12 at the top of N ≤ 100 are dominated by
the degeneracy maps and run under the ``slow`` marker (still in CI).
"""

from __future__ import annotations

import flint
import pytest

from builder.forms.newspace import NewSpace, new_space
from builder.symbols.space import cuspidal_space
from tests import oracles as o
from tests.forms_oracles import factorize, primes_upto, sigma0

# ----------------------------------------------------------------------------------------------
# linear algebra written here (not builder.linalg): restriction of an operator to a row space
# ----------------------------------------------------------------------------------------------


def _pivot_columns(B: flint.fmpq_mat) -> list[int]:
    E, rank = B.rref()
    piv, r = [], 0
    for c in range(E.ncols()):
        if r < rank and E[r, c] != 0:
            piv.append(c)
            r += 1
    assert rank == B.nrows(), "basis rows must be independent"
    return piv


def restricted(B: flint.fmpq_mat, T: flint.fmpq_mat) -> flint.fmpq_mat:
    """X with X·B = B·T, asserting that the row space of B is T-stable."""
    piv = _pivot_columns(B)
    d = B.nrows()
    Bp = flint.fmpq_mat(d, d)
    BT = B * T
    Cp = flint.fmpq_mat(d, d)
    for i in range(d):
        for j, c in enumerate(piv):
            Bp[i, j] = B[i, c]
            Cp[i, j] = BT[i, c]
    X = Cp * Bp.inv()
    assert X * B == BT, "row space is not stable under the operator"
    return X


def stacked_rank(mats: list[flint.fmpq_mat], ncols: int) -> int:
    rows = sum(m.nrows() for m in mats)
    if rows == 0:
        return 0
    S = flint.fmpq_mat(rows, ncols)
    r = 0
    for m in mats:
        for i in range(m.nrows()):
            for j in range(ncols):
                S[r, j] = m[i, j]
            r += 1
    return S.rank()


def first_good_prime(N: int) -> int:
    p = 2
    while N % p == 0 or any(p % q == 0 for q in range(2, p)):
        p += 1
    return p


# ----------------------------------------------------------------------------------------------
# dimensions ([Mt], [DS])
# ----------------------------------------------------------------------------------------------


def old_dimension(N: int, k: int) -> int:
    """Old dimension Σ_{M|N, M<N} σ0(N/M) dim S_k^new(Γ0(M)): [AL] Thm 5 (from memory)."""
    return sum(sigma0(N // M) * o.dim_new(M, k) for M in o.divisors(N) if M < N)


WEIGHT2_TOP = 500


def test_weight2_new_dimension_and_orbits_up_to_500():
    # [Mt]: dim new = Σ β(N/M) dim S_2(Γ0(M)); [DS]: dim S_2 = genus; Σ d over orbits = dim new.
    for N in range(1, WEIGHT2_TOP + 1):
        V = new_space(N, 2)
        assert V.dim == o.dim_new(N, 2), N
        assert V.space.dim_cuspidal == o.dim_cusp(N, 2), N
        assert V.space.dim_cuspidal - V.dim == old_dimension(N, 2), N
        orbits = V.orbits()
        assert sum(orb.dim for orb in orbits) == V.dim, N
        for orb in orbits:
            # the proof of irreducibility: an irreducible charpoly of degree d, from T_q (or
            # a combination Σ c·T_q) with q ∤ N and q ≤ Sturm bound (or the first good prime
            # when the bound is smaller)
            assert orb.poly.degree() == orb.dim
            _, facs = orb.poly.factor()
            assert len(facs) == 1 and facs[0][1] == 1, (N, orb.poly)
            qs = [orb.prime] if isinstance(orb.prime, int) else [q for q, _ in orb.prime]
            for q in qs:
                assert N % q and len(factorize(q)) == 1 and q > 1
                assert q <= max(k_sturm(N, 2), first_good_prime(N)), N
            assert sorted(orb.signs) == sorted(factorize(N))


def k_sturm(N: int, k: int) -> int:
    return k * o.psi(N) // 12  # [Su]


# weight k: all N ≤ 100; the N above FAST_TOP[k] are marked slow (degeneracy maps at weight ≥ 8)
FAST_TOP = {4: 100, 6: 100, 8: 70, 10: 50, 12: 40}


def _weight_cases():
    for k, top in FAST_TOP.items():
        yield pytest.param(k, 1, top, id=f"k{k}-N1-{top}")
        if top < 100:
            yield pytest.param(k, top + 1, 100, id=f"k{k}-N{top + 1}-100", marks=pytest.mark.slow)


@pytest.mark.parametrize("k,lo,hi", list(_weight_cases()))
def test_new_dimension_higher_weight(k, lo, hi):
    # [Mt] for even k ≤ 12, N ≤ 100 (the range); [DS] Thm 3.5.1 for the cuspidal part
    for N in range(lo, hi + 1):
        V = new_space(N, k)
        assert V.space.dim_cuspidal == o.dim_cusp(N, k), (N, k)
        assert V.dim == o.dim_new(N, k), (N, k)


# ----------------------------------------------------------------------------------------------
# the splitting ([AL]: W_Q and T_n commute; multiplicity one)
# ----------------------------------------------------------------------------------------------

SPLIT_CASES = [(N, 2) for N in (11, 23, 37, 60, 63, 64, 90, 96, 100, 125, 143, 169, 210)] + [
    (N, k)
    for N, k in ((1, 12), (1, 24), (5, 4), (12, 4), (13, 4), (28, 4), (45, 4), (7, 6), (16, 6))
]


@pytest.mark.parametrize("N,k", SPLIT_CASES)
def test_orbits_are_hecke_stable_irreducible_pieces(N, k):
    V = new_space(N, k)
    orbits = V.orbits()
    # the orbits span the new part as a direct sum (rows in the old-dual coordinates, which
    # also hold the new Eisenstein functionals: V.coord_dim ≥ V.dim)
    assert (
        stacked_rank([orb.basis for orb in orbits], V.coord_dim)
        == V.dim
        == sum(orb.dim for orb in orbits)
    )
    good = [p for p in primes_upto(13) if N % p]
    systems = set()
    for orb in orbits:
        # proof of irreducibility: charpoly of T_q on the piece is the stored irreducible poly
        q = orb.prime  # T_q, or a combination ((q, c), …) of them
        T = V.hecke(q) if isinstance(q, int) else sum((V.hecke(p) * c for p, c in q[1:]),
                                                      V.hecke(q[0][0]) * q[0][1])
        X = restricted(orb.basis, T)
        cp = X.charpoly()
        assert [int(c) for c in cp.coeffs()] == [int(c) for c in orb.poly.coeffs()]
        # each piece is an Atkin–Lehner eigenspace with the stored signs ([AL]: W_Q ↔ T_n commute)
        for p, e in factorize(N).items():
            W = V.atkin_lehner(p**e)
            assert orb.basis * W == orb.basis * orb.signs[p], (N, k, p)
        # and is stable under the other Hecke operators; T_p acts with charpoly g^(d/deg g)
        key = [tuple(orb.signs.items())]
        for p in good:
            Xp = restricted(orb.basis, V.hecke(p))
            cpz = flint.fmpz_poly([int(c) for c in Xp.charpoly().coeffs()])
            _, facs = cpz.factor()
            assert len(facs) == 1, (N, k, p)  # a power of one irreducible: a Galois orbit
            key.append(tuple(int(c) for c in cpz.coeffs()))
        systems.add(tuple(key))
    # multiplicity one: distinct orbits have distinct eigen-systems (distinguished by some T_q
    # below the Sturm bound; here already by the signs and T_p, p ≤ 13, in these cases)
    assert len(systems) == len(orbits)


def test_sign_pieces_partition_the_new_subspace():
    # [AL]: the W_Q (Q ∥ N) commute and are involutions, so the new subspace is the direct sum of
    # the sign-vector eigenspaces
    for N, k in [(30, 2), (210, 2), (60, 4), (66, 2)]:
        V = new_space(N, k)
        pieces = V.sign_pieces()
        assert sum(B.nrows() for _, B in pieces) == V.dim
        assert stacked_rank([B for _, B in pieces], V.coord_dim) == V.dim
        seen = set()
        for signs, B in pieces:
            assert sorted(signs) == sorted(factorize(N))
            seen.add(tuple(sorted(signs.items())))
            for p, e in factorize(N).items():
                assert B * V.atkin_lehner(p**e) == B * signs[p]
        assert len(seen) == len(pieces)


def test_level23_single_orbit_dimension_two():
    # [Cr] Table / [St] ch. 1: S_2(Γ0(23)) is one orbit with a_2 a root of x² + x − 1 (disc 5)
    V = new_space(23, 2)
    (orb,) = V.orbits()
    assert orb.dim == 2 and V.dim == 2
    assert orb.poly.discriminant() == 5
    X = restricted(orb.basis, V.hecke(2))
    assert [int(c) for c in X.charpoly().coeffs()] == [-1, 1, 1]  # x² + x − 1
    assert orb.signs == {23: -1}  # rank 0 forms of prime level with root number +1: ε = −1


def test_old_forms_are_excluded():
    # S_2(Γ0(22)) = 2·S_2(Γ0(11)) (old only) and S_2(Γ0(33)) has one new form plus 2 old ([AL])
    assert new_space(22, 2).dim == 0 and new_space(22, 2).orbits() == []
    V = new_space(33, 2)
    assert V.space.dim_cuspidal == 3 and V.dim == 1
    assert new_space(1, 2).dim == 0 and new_space(1, 2).orbits() == []


def test_new_subspace_needs_the_plus_space():
    with pytest.raises(ValueError, match="sign"):
        NewSpace(cuspidal_space(11, 2, -1))
