"""Exact linear algebra through primes (builder.linalg_modp).

The independent reference is python-flint's own exact rref over Q (fmpq_mat.rref), a
general-purpose library; the identities checked (Horner's rule, the kernel property
Z·X = 0) are common practice.
"""

from __future__ import annotations

import flint
import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from builder.linalg_modp import (
    DigitInts,
    Echelon,
    QMat,
    _compress,
    _from_digits,
    _rowspace_check,
    _scaled_digits,
    exact_rref,
    float_primes,
    int_matmul,
    to_residues,
    word_primes,
)


def _flint_rref(Z: np.ndarray) -> tuple[list[list[flint.fmpq]], int]:
    M = flint.fmpq_mat(Z.shape[0], Z.shape[1], [int(x) for x in Z.ravel()])
    R, rank = M.rref()
    return [[R[i, j] for j in range(Z.shape[1])] for i in range(rank)], rank


def _low_rank(seed: int, m: int, n: int, r: int, h: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.integers(-h, h + 1, size=(m, r)) @ rng.integers(-h, h + 1, size=(r, n))


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10**6), st.integers(1, 9), st.integers(1, 9), st.integers(1, 6),
       st.integers(1, 9))
def test_exact_rref_matches_flint(seed, m, n, r, h):
    """python-flint's fmpq_mat.rref is the reference (same pivots, same entries)."""
    Z = _low_rank(seed, m, n, r, h)
    E = exact_rref(Z)
    ref, rank = _flint_rref(Z)
    assert len(E.piv) == rank
    for i in range(rank):
        assert [flint.fmpq(int(E.num[i, j]), int(E.den)) for j in range(n)] == ref[i]


def test_exact_rref_big_heights_and_kernel():
    """A tall matrix whose rref has a denominator far beyond one word: several Dixon
    digits, the modular row-space check, and the kernel property Z·X = 0 (exact)."""
    rng = np.random.default_rng(7)
    Z = rng.integers(-8, 9, size=(160, 48)) @ rng.integers(-8, 9, size=(48, 70))
    E = exact_rref(Z)
    ref, rank = _flint_rref(Z)
    assert rank == 48 == len(E.piv)
    assert int(E.den).bit_length() > 100  # several 21-bit digits were needed
    assert E.num.dtype == object
    assert [flint.fmpq(int(E.num[5, j]), int(E.den)) for j in range(70)] == ref[5]
    X = E.kernel()
    assert X.num.shape == (70, 22)
    assert not np.any(int_matmul(Z, X.num))


def test_rowspace_check_rejects_a_wrong_echelon():
    """The modular check is exact: an entry off by a multiple of the first three primes it
    uses (invisible modulo those) is still caught, the bound asking for more primes."""
    rng = np.random.default_rng(11)
    Z = rng.integers(-8, 9, size=(90, 30)) @ rng.integers(-8, 9, size=(30, 40))
    E = exact_rref(Z)
    assert E.num.dtype == object and _rowspace_check(Z, E)
    ra = int(np.max(np.sum(np.abs(Z[:, E.piv]), axis=1)))
    top = 1 << min(50, ((1 << 53) // (2 * ra)).bit_length() - 1)
    gen = word_primes(top)
    step = next(gen) * next(gen) * next(gen)
    bad = E.num.copy()
    bad[3, E.free[0]] += step
    assert not _rowspace_check(Z, Echelon(bad, E.den, E.piv, E.ncols))


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 12), st.integers(0, 10**6))
def test_from_digits_is_horner(nd, seed):
    """Σ d_i ℓ^i from balanced digits (the extreme digits ±(ℓ−1)/2 included)."""
    ell = next(float_primes())
    rng = np.random.default_rng(seed)
    h = ell // 2
    ds = [rng.integers(-h, h + 1, size=(3, 4)) for _ in range(nd)]
    ds[0][0, 0], ds[-1][0, 1], ds[-1][2, 3] = h, -h, h
    acc = np.zeros((3, 4), dtype=object)
    for d in reversed(ds):
        acc = acc * ell + d.astype(object)
    assert np.array_equal(np.asarray(_from_digits(ds, ell), dtype=object), acc)


def test_to_residues_big_integers():
    Z = np.array([[3**90, -(5**70)], [-1, 0]], dtype=object)
    ell = 1_000_003
    R = to_residues(Z, ell)
    assert R.dtype == np.float64
    assert R.tolist() == [[float(3**90 % ell), float(-(5**70) % ell)], [float(ell - 1), 0.0]]


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 10), st.integers(1, 10**40), st.integers(0, 10**6))
def test_scaled_digits_is_the_balanced_product(nd, D, seed):
    """Digits of balanced(D·A mod ℓ^k) in int64 agree with Python integers (common
    practice: schoolbook multiplication with carries)."""
    ell = next(float_primes())
    rng = np.random.default_rng(seed)
    h = ell // 2
    ds = [rng.integers(-h, h + 1, size=(2, 3)) for _ in range(nd)]
    M = ell**nd
    A = np.asarray(_from_digits(ds, ell), dtype=object)
    want = (A * D) % M
    want = np.where(want > M // 2, want - M, want)
    got = np.asarray(DigitInts(_scaled_digits(ds, ell, D), ell).value(), dtype=object)
    assert np.array_equal(got, want)
    for p in (2_147_483_647, 1_000_003, 97):
        assert np.array_equal(DigitInts(ds, ell).mod(p), np.mod(A, p).astype(np.int64))


def test_exact_rref_digit_path_matches_flint():
    """A free block of more than 20000 entries with a denominator of several digits is
    lifted in the digit domain (no Python integers until asked): python-flint's rref is the
    reference, the kernel's residues agree with the exact kernel's, and Z·X = 0."""
    rng = np.random.default_rng(3)
    Z = rng.integers(-3, 4, size=(330, 160)) @ rng.integers(-3, 4, size=(160, 310))
    E = exact_rref(Z)
    assert E.free_digits is not None and len(E.piv) == 160
    assert int(E.den).bit_length() > 62
    ref, rank = _flint_rref(Z)
    assert rank == 160
    for i in (0, 77, 159):
        assert [flint.fmpq(int(E.num[i, j]), int(E.den)) for j in range(310)] == ref[i]
    X = E.kernel()
    ell = next(float_primes())
    assert np.array_equal(X.mod(ell), QMat(X.num, X.den).mod(ell))
    assert not np.any(int_matmul(Z, X.num))


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 10**6), st.integers(2, 12), st.integers(-3, 3))
def test_rank_bound_compression_gives_the_same_rref(seed, r, off):
    """A tall matrix eliminated through the sparse compression to rank_max + 16 rows has
    python-flint's rref; a bound below the true rank (off < 0) loses rows of the row space
    in the compression, the exact check refuses it and the later attempts use Z itself."""
    rng = np.random.default_rng(seed)
    n = 30
    Z = rng.integers(-4, 5, size=(120, r)) @ rng.integers(-4, 5, size=(r, n))
    Z[rng.integers(0, 120, size=10)] = 0  # zero rows, as the old conditions have
    rank_max = max(r + off, 0)
    if off >= 0:
        assert _compress(Z, 0, rank_max).shape == (rank_max + 16, n)
    E = exact_rref(Z, rank_max=rank_max)
    ref, rank = _flint_rref(Z)
    assert len(E.piv) == rank == r
    for i in range(rank):
        assert [flint.fmpq(int(E.num[i, j]), int(E.den)) for j in range(n)] == ref[i]


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 10**6), st.integers(1, 40), st.integers(1, 61), st.integers(1, 61))
def test_int_matmul_is_the_integer_product(seed, n, bits_a, bits_b):
    """Every path of int_matmul (one float product, 21-bit limbs added modulo 2^64 when the
    float product proves |A·B| < 2^62, 24-bit limbs with Python integers, FLINT) against
    the product in Python integers (common practice)."""
    rng = np.random.default_rng(seed)
    A = rng.integers(-(1 << bits_a), 1 << bits_a, size=(7, n), dtype=np.int64)
    B = rng.integers(-(1 << bits_b), 1 << bits_b, size=(n, 5), dtype=np.int64)
    ref = A.astype(object) @ B.astype(object)
    got = int_matmul(A, B)
    assert got.shape == ref.shape
    assert all(int(x) == int(y) for x, y in zip(got.ravel(), ref.ravel(), strict=True))


def test_int_matmul_limbs_of_mixed_sizes():
    """Entries of 60 and 40 bits whose product is still below 2^62: the limb products
    shifted past 2^64 are dropped (they vanish modulo 2^64), the result is exact."""
    A = np.array([[1 << 60, 1, -3], [-(1 << 59) + 5, 7, 1 << 20]], dtype=np.int64)
    B = np.array([[1, -1], [(1 << 40) - 1, 1 << 39], [5, -(1 << 38)]], dtype=np.int64)
    ref = A.astype(object) @ B.astype(object)
    assert [int(x) for x in int_matmul(A, B).ravel()] == [int(x) for x in ref.ravel()]
