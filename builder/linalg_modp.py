"""Dense linear algebra modulo small primes on float64 BLAS, and exact results from it.

Why: the symbol spaces of level ~10⁴ have dimension ~1500, and the one big elimination of a
unit (the old-space conditions, ~2n × n) is the cost that decides whether a table of
weight 2 up to level 10⁴ fits in a night.  Word-size modular arithmetic in FLINT's nmod_mat
runs at ~1.5 GFlop/s on the reference machine (1500³ product: 2.3 s); numpy's float64
matrix product runs at ~45 GFlop/s (0.15 s) and is exact for integers below 2^53.  With
primes ℓ < 2^21 every product of two residues is below 2^42, so a sum of up to 2^11 of them
is exact: blocked Gauss–Jordan elimination whose block updates are float matrix products is
exact modular arithmetic at BLAS speed (the idea of FFLAS-FFPACK; common practice).

Exact results (``exact_rref``): the rref over Q of an integer matrix Z is computed modulo
one or more such primes, lifted by CRT and rational reconstruction (Wang's algorithm,
vectorised), and **accepted only after an exact check**: every row of Z equals
Z[:, pivots]·R (so rowspace(Z) ⊂ rowspace(R)), while rank_Q(Z) ≥ rank_ℓ(Z) = rank(R).
Hence rowspace(Z) = rowspace(R) and R, being in rref, is *the* rref of Z.  A prime where
the rank drops or the pivots move is simply outvoted (the largest rank, then the
lexicographically first pivots, is the generic one over Q).

Conventions: integer matrices are numpy int64 arrays (object arrays of Python ints when
entries may not fit); an exact rational matrix is ``QMat(num, den)`` = num/den.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from math import gcd, isqrt

import flint
import numpy as np

from builder.arith import is_prime_large

FLOAT_PRIME_TOP = 1 << 21  # residues < 2^21: products < 2^42, 2^11 of them sum exactly
_BLOCK = 64  # panel width of the blocked elimination (k·ℓ² < 2^53 needs k ≤ 2^11)
_F53 = float(1 << 53)
_COMPRESS_SLACK = 16  # rows of a sparse compression beyond the rank bound
_LIMB_BITS = 21  # int64 products by limbs: two limbs multiply below 2^42 …
_LIMB_MASK = (1 << _LIMB_BITS) - 1
_LIMB_TERMS = 1 << 11  # … and 2^11 such products add up exactly in a float


_PRIME_LISTS: dict[int, list[int]] = {}


def word_primes(top: int = 1 << 31):
    """Primes below ``top`` in decreasing order (endless generator, cached list)."""
    cache = _PRIME_LISTS.setdefault(top, [])
    i = 0
    while True:
        if i == len(cache):
            p = (cache[-1] if cache else top + 1) - 2
            if p % 2 == 0:
                p -= 1
            while not is_prime_large(p):
                p -= 2
            cache.append(p)
        yield cache[i]
        i += 1


def float_primes():
    """Primes below 2^21 in decreasing order (endless generator)."""
    return word_primes(FLOAT_PRIME_TOP)


# -- residues and products ----------------------------------------------------------------


def to_residues(Z: np.ndarray, ell: int) -> np.ndarray:
    """Integer array → float64 residues in [0, ℓ)."""
    if Z.dtype == object:
        return np.mod(Z, ell).astype(np.int64).astype(np.float64)
    return np.mod(Z, ell).astype(np.float64)


def _reduce(X: np.ndarray, ell: int) -> np.ndarray:
    """In place: X ← X − rint(X/ℓ)·ℓ, a representative in (−ℓ, ℓ) (exact for |X| < 2^52).

    Faster than fmod, whose cost grows with the exponent gap (glibc divides bit by bit);
    an integer ≡ 0 (mod ℓ) always comes out as exactly 0, so zero tests stay exact.
    """
    q = np.rint(X * (1.0 / ell))
    q *= ell
    X -= q
    return X


def matmul_mod(A: np.ndarray, B: np.ndarray, ell: int) -> np.ndarray:
    """A·B mod ℓ for residue matrices with entries in (−2ℓ, 2ℓ) (inner dim split exactly).

    Primes ℓ ≥ 2^21 (outside the float range) go through FLINT's nmod_mat: exact, slower.
    """
    if ell >= FLOAT_PRIME_TOP:
        return _nmod_matmul(A, B, ell)
    k = A.shape[1]
    step = max(1, int(_F53 // (4.0 * float(ell) ** 2)))
    if k <= step:
        return _reduce(A @ B, ell)
    out = np.zeros((A.shape[0], B.shape[1]))
    for s in range(0, k, step):
        out += _reduce(A[:, s : s + step] @ B[s : s + step], ell)
        _reduce(out, ell)
    return out


def _nmod_matmul(A: np.ndarray, B: np.ndarray, ell: int) -> np.ndarray:
    m, k = A.shape
    n = B.shape[1]
    if m == 0 or n == 0 or k == 0:
        return np.zeros((m, n))
    FA = flint.nmod_mat(m, k, [int(x) % ell for x in A.ravel()], ell)
    FB = flint.nmod_mat(k, n, [int(x) % ell for x in B.ravel()], ell)
    P = FA * FB
    return np.array([int(x) for x in P.entries()], dtype=np.float64).reshape(m, n)


def _inv_mod_small(B: np.ndarray, ell: int) -> np.ndarray:
    """Inverse of a small invertible residue matrix (Gauss–Jordan on [B | I])."""
    k = B.shape[0]
    M = np.concatenate([np.mod(B, ell), np.eye(k)], axis=1)
    for j in range(k):
        nz = np.nonzero(M[j:, j])[0]
        if len(nz) == 0:
            raise ZeroDivisionError("pivot block is singular modulo ℓ")
        i = j + int(nz[0])
        if i != j:
            M[[i, j]] = M[[j, i]]
        M[j] = _reduce(M[j] * pow(int(M[j, j]) % ell, -1, ell), ell)
        f = M[:, j].copy()
        f[j] = 0
        M -= np.outer(f, M[j])
        _reduce(M, ell)
    return M[:, k:]


def rref_mod(A: np.ndarray, ell: int, block: int = _BLOCK) -> tuple[np.ndarray, list[int]]:
    """The rref of a residue matrix modulo a prime ℓ < 2^21: (R, pivot columns)."""
    R, pcols, _ = rref_mod_rows(A, ell, block)
    return R, pcols


def rref_mod_rows(A: np.ndarray, ell: int, block: int = _BLOCK,
                  record: list | None = None) -> tuple[np.ndarray, list[int], list[int]]:
    """Reduced row echelon form of a residue matrix modulo a prime ℓ < 2^21.

    Returns (R, pivot columns, pivot rows): R has one row per pivot (rank rows, residues
    in [0, ℓ)), R[:, pivots] = identity, and A[pivot rows][:, pivot columns] is invertible.
    Blocked Gauss–Jordan: the pivots of a panel of ``block`` columns are found by
    unblocked elimination on the panel alone, then the whole matrix is updated with one
    float matrix product (rows ← rows − A[:, C]·B⁻¹A[S, :] for the panel's
    pivot block B).  Entries are symmetric residues; the trailing matrix is reduced only
    when the accumulated updates (each below k·ℓ²/4) could approach 2^52, and each panel
    is reduced just before it is used.  With ``record`` (a list), every panel's
    (rows S, B⁻¹, multipliers A[:, C]) is appended, so that the same row operations can be
    replayed on new columns later (``solve_recorded``).
    """
    if ell >= FLOAT_PRIME_TOP:
        raise ValueError(f"rref_mod needs a prime below 2^21, got {ell}")
    A = np.array(A, dtype=np.float64, order="F")  # residues, |entries| < ℓ
    m, n = A.shape
    avail = np.ones(m, dtype=bool)
    prows: list[int] = []
    pcols: list[int] = []
    growth = 0.0  # bound on |entries| of the trailing matrix
    limit = float(1 << 52)
    c = 0
    while c < n and len(prows) < m:
        ce = min(n, c + block)
        _reduce(A[:, c:ce], ell)
        rows = np.nonzero(avail)[0]
        P = A[rows, c:ce]
        live = np.nonzero(np.any(P != 0, axis=1))[0]
        P = np.asfortranarray(P[live])
        free = np.ones(len(live), dtype=bool)
        S: list[int] = []
        C: list[int] = []
        for j in range(ce - c):
            cand = np.nonzero((P[:, j] != 0) & free)[0]
            if len(cand) == 0:
                continue
            i = int(cand[0])
            free[i] = False
            S.append(int(rows[live[i]]))
            C.append(c + j)
            if j + 1 == ce - c:
                break
            inv = pow(int(P[i, j]) % ell, -1, ell)
            piv_row = _reduce(P[i, j + 1 :] * inv, ell)
            f = np.where(free, P[:, j], 0.0)
            Q = P[:, j + 1 :]
            Q -= np.outer(f, piv_row)
            _reduce(Q, ell)
        if S:
            k = len(S)
            Binv = _inv_mod_small(A[np.ix_(S, C)], ell)
            if ce < n and growth + k * (ell / 2.0 + 1) ** 2 + ell > limit:
                _reduce(A[:, ce:], ell)
                growth = 0.0
            top = matmul_mod(Binv, _reduce(A[S, c:], ell), ell)
            G = np.asfortranarray(A[:, C])
            if record is not None:
                record.append((S, Binv, G))
            U = A[:, c:]
            U -= G @ np.asfortranarray(top)  # |G·top| ≤ k·ℓ²/4: exact
            growth += k * (ell / 2.0 + 1) ** 2 + ell
            U[S] = top
            avail[S] = False
            prows.extend(S)
            pcols.extend(C)
        c = ce
    return np.mod(A[prows], ell), pcols, prows


def solve_recorded(record: list, prows: list[int], rhs: np.ndarray, ell: int) -> np.ndarray:
    """B⁻¹·rhs modulo ℓ for B = A[prows][:, pivots] of a recorded elimination.

    rhs has one row per pivot row (in the order of ``prows``); the recorded Gauss–Jordan
    steps are applied to it as to an extra column of A[prows] (the row operations on pivot
    rows only ever involve pivot rows).
    """
    pos = {row: i for i, row in enumerate(prows)}
    r = np.array(rhs, dtype=np.float64)
    for S, Binv, G in record:
        idx = [pos[x] for x in S]
        top = matmul_mod(Binv, _reduce(r[idx], ell), ell)
        r -= G[prows] @ top
        _reduce(r, ell)
        r[idx] = top
    return np.mod(r, ell)


# -- rational reconstruction ---------------------------------------------------------------


def rational_reconstruct(a: np.ndarray, M: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Vectorised Wang reconstruction: a ≡ n/d (mod M) with |n|, d ≤ sqrt(M/2).

    ``a`` holds residues in [0, M) (int64 when M < 2^62, else object).  Returns
    (n, d, ok); where ok is False the entry has no such fraction (d = 1, n = 0 there).
    """
    bound = isqrt(M // 2)
    obj = M >= (1 << 62)
    dt = object if obj else np.int64
    r0 = np.full(a.shape, M, dtype=dt)
    r1 = np.array(a, dtype=dt)
    s0 = np.zeros(a.shape, dtype=dt)
    s1 = np.ones(a.shape, dtype=dt)
    while True:
        act = r1 > bound
        if not np.any(act):
            break
        q = np.where(act, r0 // np.where(r1 == 0, 1, r1), 0)
        r0, r1 = np.where(act, r1, r0), np.where(act, r0 - q * r1, r1)
        s0, s1 = np.where(act, s1, s0), np.where(act, s0 - q * s1, s1)
    neg = s1 < 0
    n = np.where(neg, -r1, r1)
    d = np.where(neg, -s1, s1)
    ok = (d != 0) & (np.abs(d) <= bound)
    if obj:
        g = np.array([gcd(int(x), int(y)) for x, y in zip(n.ravel(), d.ravel(), strict=True)],
                     dtype=object).reshape(n.shape)
    else:
        g = np.gcd(n, d)
    ok &= g == 1
    return np.where(ok, n, 0), np.where(ok, d, 1), ok


def crt_arrays(acc: np.ndarray, M: int, r: np.ndarray, ell: int) -> tuple[np.ndarray, int]:
    """Combine residues acc (mod M) and r (mod ℓ) into residues mod M·ℓ (object if large)."""
    inv = pow(M % ell, -1, ell)
    big = M * ell >= (1 << 62)
    if big:
        acc = acc.astype(object)
        t = ((r.astype(object) - acc) % ell) * inv % ell
        return acc + t * M, M * ell
    acc = acc.astype(np.int64)
    t = np.mod((r.astype(np.int64) - acc) % ell * inv, ell)
    return acc + t * M, M * ell


def common_denominator(d: np.ndarray) -> int:
    D = 1
    for x in np.unique(d).tolist():
        x = int(x)
        D = D * x // gcd(D, x)
    return D


# -- exact rational matrices ------------------------------------------------------------------


@dataclass
class QMat:
    """An exact rational matrix num/den (num an int64 or object integer array, den ≥ 1)."""

    num: np.ndarray
    den: int = 1

    @property
    def shape(self) -> tuple[int, int]:
        return self.num.shape

    def reduced(self) -> QMat:
        g = self.den
        if g == 1:
            return self
        if self.num.dtype == object:
            for x in self.num.ravel():
                g = gcd(g, int(x))
                if g == 1:
                    return self
        elif self.num.size:
            g = gcd(g, int(np.gcd.reduce(self.num.ravel())))
        if g == 1:
            return self
        return QMat(self.num // g, self.den // g)

    def mod(self, ell: int) -> np.ndarray:
        """Residues in [0, ℓ) as float64 (ℓ must not divide den)."""
        if ell >= FLOAT_PRIME_TOP:
            return np.asarray(self.mod_int(ell), dtype=np.float64)
        inv = pow(self.den % ell, -1, ell)
        R = to_residues(self.num, ell)
        return R if inv == 1 else np.mod(R * inv, ell)

    def mod_int(self, ell: int) -> np.ndarray:
        """Residues in [0, ℓ) as int64 or object (any ℓ not dividing den)."""
        inv = pow(self.den % ell, -1, ell)
        if self.num.dtype == object or ell >= (1 << 31):
            R = np.array([int(x) % ell * inv % ell for x in self.num.ravel()], dtype=object)
            return R.reshape(self.num.shape)
        return np.mod(np.mod(self.num, ell) * inv, ell)

    def __matmul__(self, other: QMat) -> QMat:
        return QMat(int_matmul(self.num, other.num), self.den * other.den).reduced()

    def __sub__(self, other: QMat) -> QMat:
        D = self.den * other.den // gcd(self.den, other.den)
        a = _scale(self.num, D // self.den)
        b = _scale(other.num, D // other.den)
        return QMat(_as_int(a - b), D).reduced()

    def rows(self, idx) -> QMat:
        return QMat(self.num[idx], self.den)

    def to_fmpq_mat(self) -> flint.fmpq_mat:
        r, c = self.shape
        Z = flint.fmpz_mat(r, c, [int(x) for x in self.num.ravel()]) if r and c else (
            flint.fmpz_mat(r, c))
        return flint.fmpq_mat(Z) / self.den if self.den != 1 else flint.fmpq_mat(Z)

    @staticmethod
    def from_fmpq_mat(A: flint.fmpq_mat) -> QMat:
        Z, den = A.numer_denom()
        r, c = A.nrows(), A.ncols()
        vals = [int(x) for x in Z.entries()] if r and c else []
        return QMat(_as_int(np.array(vals, dtype=object).reshape(r, c)), int(den))

    @staticmethod
    def identity(n: int) -> QMat:
        return QMat(np.eye(n, dtype=np.int64), 1)

    def is_zero(self) -> bool:
        return not np.any(self.num != 0)


def _scale(Z: np.ndarray, s: int) -> np.ndarray:
    if s == 1:
        return Z
    if Z.dtype != object and _absmax(Z) * s < (1 << 62):
        return Z * s
    return Z.astype(object) * s


def _absmax(Z: np.ndarray) -> int:
    if not Z.size:
        return 0
    if Z.dtype == object:
        return int(np.max(np.abs(Z)))
    return max(int(Z.max()), -int(Z.min()))  # no |Z| copy of a big matrix


def _as_int(Z: np.ndarray) -> np.ndarray:
    """int64 when every entry fits comfortably, else object."""
    if Z.dtype != object:
        return Z
    if Z.size == 0:
        return Z.astype(np.int64)
    m = int(np.max(np.abs(Z)))
    return Z.astype(np.int64) if m < (1 << 62) else Z


def int_matmul(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Exact integer product, through float64 BLAS whenever that is exact.

    For each column the bound max row-abs-sum(A)·max|B| < 2^53 makes the float product
    exact; otherwise B is cut into 24-bit limbs (exact per limb when A's row sums are below
    2^29) and recombined in Python integers; else FLINT's fmpz_mat.
    """
    if A.shape[1] != B.shape[0]:
        raise ValueError(f"shape mismatch {A.shape} · {B.shape}")
    if A.size == 0 or B.size == 0:
        return np.zeros((A.shape[0], B.shape[1]), dtype=np.int64)
    ra = _rowabs_max(A)
    mb = _absmax(B)
    if ra * mb < (1 << 53) and A.dtype != object and B.dtype != object:
        return np.rint(A.astype(np.float64) @ B.astype(np.float64)).astype(np.int64)
    if A.dtype != object and B.dtype != object and A.shape[1] <= _LIMB_TERMS:
        # the float product is within n·2^-52·ra·mb of A·B: if that proves |A·B| < 2^62,
        # the product modulo 2^64 (limbs) is A·B
        approx = float(np.max(np.abs(A.astype(np.float64) @ B.astype(np.float64))))
        if approx + (A.shape[1] + 2) * float(ra) * float(mb) * 2.0**-52 < float(1 << 62):
            return _limb_matmul(A, B)
    if ra < (1 << 29) and A.dtype != object:
        Af = A.astype(np.float64)
        Bo = B.astype(object)
        sign = np.where(Bo < 0, -1, 1)
        mag = Bo * sign
        out = np.zeros((A.shape[0], B.shape[1]), dtype=object)
        shift = 0
        while np.any(mag != 0):
            limb = (mag % (1 << 24)).astype(np.int64) * sign.astype(np.int64)
            part = np.rint(Af @ limb.astype(np.float64)).astype(np.int64).astype(object)
            out = out + part * (1 << shift)
            mag = mag >> 24
            shift += 24
        return _as_int(out)
    FA = flint.fmpz_mat(A.shape[0], A.shape[1], [int(x) for x in A.ravel()])
    FB = flint.fmpz_mat(B.shape[0], B.shape[1], [int(x) for x in B.ravel()])
    P = FA * FB
    return _as_int(np.array([int(x) for x in P.entries()], dtype=object).reshape(
        A.shape[0], B.shape[1]))


def _limb_matmul(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """A·B modulo 2^64 (as int64) for int64 matrices with at most 2^11 columns in A: both
    are cut into signed 21-bit limbs, every limb product (≤ 2^11 terms below 2^42) is an
    exact float product, and the shifted products add up in wrapping uint64.  Equal to A·B
    whenever |A·B| < 2^63 (the caller proves it)."""
    def limbs(X: np.ndarray) -> list[np.ndarray]:
        sign = np.where(X < 0, -1, 1)
        mag = np.abs(X)
        out = []
        while True:
            out.append(((mag & _LIMB_MASK) * sign).astype(np.float64))
            mag = mag >> _LIMB_BITS
            if not np.any(mag):
                return out
    la, lb = limbs(A), limbs(B)
    C = np.zeros((A.shape[0], B.shape[1]), dtype=np.uint64)
    for i, a in enumerate(la):
        for j, b in enumerate(lb):
            shift = _LIMB_BITS * (i + j)
            if shift < 64:  # the other terms vanish modulo 2^64
                C += np.rint(a @ b).astype(np.int64).view(np.uint64) << np.uint64(shift)
    return C.view(np.int64)


def _rowabs_max(A: np.ndarray) -> int:
    if not A.size:
        return 0
    if A.dtype == object:
        return int(np.max(np.sum(np.abs(A), axis=1)))
    if _absmax(A) * A.shape[1] < (1 << 62):
        return int(np.abs(A).sum(axis=1).max())
    return int(np.max(np.sum(np.abs(A).astype(np.float64), axis=1)))


def q_equal(A: QMat, B: QMat) -> bool:
    """A == B exactly (A.num·B.den == B.num·A.den)."""
    if A.shape != B.shape:
        return False
    a, b = _scale(A.num, B.den), _scale(B.num, A.den)
    if a.dtype == object or b.dtype == object:
        return bool(np.all(a.astype(object) == b.astype(object)))
    return bool(np.array_equal(a, b))


# -- exact rref, kernel, image ---------------------------------------------------------------


class Echelon:
    """The exact rref of an integer matrix: R = num/den (rank × ncols), R[:, piv] = I.

    A big lifted echelon form keeps its free block as balanced ℓ-adic digits
    (``free_digits``): its residues modulo other primes, which is all the modular code
    needs, come from the digits in int64, and ``num`` is built from them only on demand.
    """

    def __init__(self, num: np.ndarray | None, den: int, piv: list[int], ncols: int,
                 free_digits: DigitInts | None = None) -> None:
        self._num = num
        self.den, self.piv, self.ncols = den, piv, ncols
        self.free_digits = free_digits

    @property
    def num(self) -> np.ndarray:
        if self._num is None:
            R = np.zeros((self.rank, self.ncols), dtype=object)
            for i, c in enumerate(self.piv):
                R[i, c] = self.den
            R[:, self.free] = self.free_digits.value()
            self._num = _as_int(R)
        return self._num

    @property
    def rank(self) -> int:
        return len(self.piv)

    @property
    def free(self) -> list[int]:
        return _complement(self.piv, self.ncols)

    def kernel(self) -> QMat:
        """Columns spanning {x : Z·x = 0}: X[free, :] = I, X[piv, :] = −R[:, free]."""
        free = self.free
        if self.free_digits is not None:
            return DigitKernel(self, free)
        X = np.zeros((self.ncols, len(free)), dtype=self.num.dtype)
        for j, c in enumerate(free):
            X[c, j] = self.den
        if self.piv and free:
            X[self.piv, :] = -self.num[:, free]
        return QMat(X, self.den).reduced()

    def rows(self) -> QMat:
        return QMat(self.num, self.den)


class DigitInts:
    """An integer matrix Σ_m f_m·ℓ^m held as balanced digits |f_m| ≤ (ℓ − 1)/2 (int64
    arrays, ℓ < 2^21 odd): residues modulo word primes by Horner's rule in int64, the
    Python-integer value only on demand."""

    def __init__(self, digits: list[np.ndarray], ell: int) -> None:
        self.digits, self.ell = digits, ell
        self.shape = digits[0].shape

    def bound(self) -> int:
        """An integer > every |entry|."""
        return self.ell ** len(self.digits)

    def mod(self, p: int) -> np.ndarray:
        """Residues in [0, p) (int64) for a modulus p < 2^31."""
        if p >= (1 << 31):
            raise ValueError(f"DigitInts.mod needs p < 2^31, got {p}")
        base = self.ell % p
        acc = np.zeros(self.shape, dtype=np.int64)
        for f in reversed(self.digits):
            acc = np.mod(acc * base + f, p)
        return acc

    def value(self) -> np.ndarray:
        return _as_int(np.asarray(_from_digits(self.digits, self.ell)))

    def entry(self, flat_index: int) -> int:
        return sum(int(f.flat[flat_index]) * self.ell**m for m, f in enumerate(self.digits))


class DigitKernel(QMat):
    """``Echelon.kernel()`` of a digit echelon form: X[free] = den·I, X[piv] = −(free
    block), over den (not reduced).  Residues come from the digits; ``num`` is built
    only when something needs the exact integers."""

    def __init__(self, E: Echelon, free: list[int]) -> None:
        self.E, self.den, self._free = E, E.den, free

    @cached_property
    def num(self) -> np.ndarray:  # type: ignore[override]
        X = np.zeros(self.shape, dtype=object)
        X[self._free, np.arange(len(self._free))] = self.den
        if self.E.piv:
            X[self.E.piv, :] = -self.E.free_digits.value()
        return _as_int(X)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.E.ncols, len(self._free))

    def reduced(self) -> QMat:
        return self

    def mod(self, ell: int) -> np.ndarray:
        if ell >= FLOAT_PRIME_TOP:
            return np.asarray(self.mod_int(ell), dtype=np.float64)
        return self.mod_int(ell).astype(np.float64)

    def mod_int(self, ell: int) -> np.ndarray:
        if ell >= (1 << 31):
            return QMat(self.num, self.den).mod_int(ell)
        inv = pow(self.den % ell, -1, ell)
        X = np.zeros(self.shape, dtype=np.int64)
        X[self._free, np.arange(len(self._free))] = 1
        if self.E.piv:
            X[self.E.piv, :] = np.mod(-self.E.free_digits.mod(ell) * inv, ell)
        return X


def exact_rref(Z: np.ndarray, max_primes: int = 8, rank_max: int | None = None) -> Echelon:
    """The rref over Q of the integer matrix Z: modular elimination, Dixon lifting, and an
    exact check.

    One elimination modulo ℓ < 2^21 gives the pivot columns, independent pivot rows S and
    the blocks B = Z[S, piv] (invertible mod ℓ), C = Z[S, free]; then Y = B⁻¹C (= the free
    part of the rref) is lifted ℓ-adically (Dixon: Y_i = B⁻¹R_i mod ℓ,
    R_{i+1} = (R_i − B·Y_i)/ℓ, every product an exact float product), reconstructed as
    rationals, and accepted only if Z·den == Z[:, piv]·R exactly (see the module doc).  A
    prime that fails (a rank drop, no lift) is replaced by the next one.

    ``rank_max`` (an upper bound on the rank, e.g. from a dimension formula) lets a tall Z
    be eliminated through a sparse random compression to rank_max + 16 rows
    (``_compress``); a wrong bound only costs time: the check on Z fails and the later
    attempts eliminate Z itself.
    """
    Z = _as_int(np.asarray(Z))
    m, n = Z.shape
    if m == 0 or n == 0 or not np.any(Z != 0):
        return Echelon(np.zeros((0, n), dtype=np.int64), 1, [], n)
    best = -1
    for attempt, ell in enumerate(float_primes()):
        if attempt >= max_primes:
            break
        W = _compress(Z, attempt, rank_max if attempt < 2 else None)
        record: list = []
        R, piv, prows = rref_mod_rows(to_residues(W, ell), ell, record=record)
        if len(piv) < best:
            continue
        best = len(piv)
        free = _complement(piv, n)
        if not free:
            E = Echelon(_identity_rows(piv, n), 1, list(piv), n)
            if _rowspace_check(Z, E):
                return E
            continue
        E = _dixon(Z, W, piv, prows, free, ell, R[:, free], record)
        if E is not None:
            return E
    raise ArithmeticError(f"exact rref of a {m}×{n} matrix did not lift")


def _complement(piv: list[int], n: int) -> list[int]:
    """The columns 0..n−1 that are not pivots, increasing."""
    ps = set(piv)
    return [c for c in range(n) if c not in ps]


def _compress(Z: np.ndarray, seed: int, rank_max: int | None = None) -> np.ndarray:
    """Z itself, or G·Z with the same row space for almost every G, fewer rows, checked
    later on Z itself (``exact_rref``).

    With a rank bound r: G is sparse with r + 16 rows, each row of Z entering one output
    row with a random sign plus one more with a random coefficient in {−2, …, 2} (two
    permutations; a cost of 2·m·n additions, against m·n·r for eliminating Z).  Without
    one, a dense random ±1/0 matrix with n + 8 rows, used only when Z has more than 2n + 8
    rows (the product costs about as much as eliminating the extra rows: measured on the
    old-space conditions of levels 8000–10000)."""
    m, n = Z.shape
    if Z.dtype == object:
        return Z
    rng = np.random.default_rng(1000 + seed)
    if rank_max is not None:
        rows = min(max(rank_max, 0), n) + _COMPRESS_SLACK
        if m <= rows + rows // 8 or _absmax(Z) * 3 * (m // rows + 2) >= (1 << 62):
            return Z
        out = np.zeros((rows, n), dtype=np.int64)
        for coeffs in (rng.choice([-1, 1], size=m), rng.integers(-2, 3, size=m)):
            perm = rng.permutation(m)
            for s in range(0, m, rows):
                idx = perm[s : s + rows]
                out[: len(idx)] += Z[idx] * coeffs[s : s + rows, None]
        return out
    if m <= 2 * n + 8:
        return Z
    G = rng.integers(-1, 2, size=(n + 8, m)).astype(np.int64)
    return int_matmul(G, Z)


def _identity_rows(piv: list[int], n: int) -> np.ndarray:
    R = np.zeros((len(piv), n), dtype=np.int64)
    for i, c in enumerate(piv):
        R[i, c] = 1
    return R


def _dixon(Z: np.ndarray, W: np.ndarray, piv: list[int], prows: list[int], free: list[int],
           ell: int, first: np.ndarray, record: list,
           max_bits: int = 1 << 16) -> Echelon | None:
    n = Z.shape[1]
    ZS = W[prows]
    B, C = ZS[:, piv], ZS[:, free]
    small = B.dtype != object and C.dtype != object and _rowabs_max(B) * ell < (1 << 52)
    Bf = B.astype(np.float64) if small else None
    Rcur = C.astype(np.float64) if small else C.astype(object)
    half = ell // 2
    Yi = first.astype(np.int64)
    digits: list[np.ndarray] = []
    flat_nz = np.nonzero(np.ravel(first))[0]
    sample = flat_nz[np.unique(np.linspace(0, max(len(flat_nz) - 1, 0),
                                           min(64, len(flat_nz))).astype(np.int64))]
    acc_s = np.zeros(len(sample), dtype=object)
    M = 1
    while M.bit_length() < max_bits:
        if digits:
            rhs = to_residues(Rcur, ell) if not small else np.mod(Rcur, ell)
            Yi = solve_recorded(record, prows, rhs, ell).astype(np.int64)
        Yi = np.where(Yi > half, Yi - ell, Yi)
        digits.append(Yi)
        acc_s = acc_s + np.ravel(Yi)[sample].astype(object) * M
        if small:
            Rcur = (Rcur - Bf @ Yi.astype(np.float64)) / ell
        else:
            Rcur = (Rcur - int_matmul(B, Yi).astype(object)) // ell
        M *= ell
        cand = _common_denominator_lift(np.mod(acc_s, M)[None, :], M) if len(digits) > 1 else None
        if cand is None:
            continue  # the sample does not lift yet: more digits first (cheap test)
        if M >= (1 << 62) and digits[0].size > 20000:
            E = _lift_echelon_digits(digits, ell, cand[1], piv, n)
        else:
            acc = _from_digits(digits, ell)
            E = _lift_echelon(_as_int(np.mod(acc, M)) if M < (1 << 62) else np.mod(acc, M), M,
                              piv, n)
        if E is not None and _rowspace_check(Z, E):
            return E
    return None


def _lift_echelon_digits(digits: list[np.ndarray], ell: int, D: int, piv: list[int],
                         n: int, rounds: int = 4) -> Echelon | None:
    """``_lift_echelon`` for a big block without Python integers: a candidate common
    denominator D (from a sample, enlarged by the entries that do not come out small) turns
    the ℓ-adic approximation A of the free block into numerators balanced(D·A mod ℓ^k),
    computed digit by digit in int64 (``_scaled_digits``).  They are accepted as small when
    every digit from h on vanishes, ℓ^h ≤ 2·sqrt(M/2) (so |num|, D ≤ sqrt(M/2): Wang's
    uniqueness bound); the caller still checks the result exactly."""
    k = len(digits)
    M = ell**k
    limit = isqrt(M // 2)
    h = 0
    while ell ** (h + 1) <= 2 * limit:
        h += 1
    for _ in range(rounds):
        if D > limit:
            return None
        f = _scaled_digits(digits, ell, D)
        big = np.zeros(f[0].shape, dtype=bool)
        for m in range(h, k):
            big |= f[m] != 0
        if not np.any(big):
            top = max((m for m in range(h) if np.any(f[m] != 0)), default=0)
            return Echelon(None, D, list(piv), n, free_digits=DigitInts(f[: top + 1], ell))
        A = DigitInts(digits, ell)
        for idx in np.nonzero(big.ravel())[0][:16].tolist():
            r = _rr_one(A.entry(idx) * D % M, M)
            if r is None:
                return None
            D *= r[1]
    return None


def _scaled_digits(digits: list[np.ndarray], ell: int, D: int) -> list[np.ndarray]:
    """Balanced base-ℓ digits of D·A mod ℓ^k for A = Σ_{m<k} digits[m]·ℓ^m (int64 only:
    each column sum of digit products stays below k·2^41, exact for k < 2^21)."""
    k = len(digits)
    e = []
    x = D % ell**k
    while x and len(e) < k:
        e.append(x % ell)
        x //= ell
    out = []
    carry = np.zeros(digits[0].shape, dtype=np.int64)
    half = ell // 2
    for m in range(k):
        t = carry
        for j in range(min(m + 1, len(e))):
            if e[j]:
                t = t + digits[m - j] * e[j]
        q = (t + half) // ell
        out.append(t - q * ell)
        carry = q
    return out


def _from_digits(digits: list[np.ndarray], ell: int) -> np.ndarray:
    """Σ digits[i]·ℓ^i for balanced digits |d| < ℓ/2, ℓ < 2^21: groups of three summed in
    int64 (|d0 + d1·ℓ + d2·ℓ²| < 2^63), then a balanced tree of Python-integer sums (a
    third of the big-number passes of Horner's rule)."""
    if ell >= FLOAT_PRIME_TOP:
        raise ValueError(f"digits modulo {ell}: int64 grouping needs ℓ < 2^21")
    level = [sum(digits[j] * ell ** (j - i) for j in range(i, min(i + 3, len(digits))))
             for i in range(0, len(digits), 3)]
    if len(level) == 1:
        return level[0]
    parts = [x.astype(object) for x in level]
    base = ell ** 3
    while len(parts) > 1:
        parts = [parts[i] + parts[i + 1] * base if i + 1 < len(parts) else parts[i]
                 for i in range(0, len(parts), 2)]
        base *= base
    return parts[0]


def _lift_echelon(acc: np.ndarray, M: int, piv: list[int], n: int) -> Echelon | None:
    rank = len(piv)
    free = _complement(piv, n)
    lifted = _common_denominator_lift(acc, M)
    if lifted is None:
        if acc.size > 20000:
            return None  # more primes first: the full reconstruction is slow on big blocks
        num_f, den_f, ok = rational_reconstruct(acc, M)
        if not np.all(ok):
            return None
        D = common_denominator(den_f) if den_f.size else 1
        scale = (D // den_f) if den_f.dtype == object else _div_array(D, den_f)
        Nf = _as_int(np.asarray(num_f, dtype=object) * np.asarray(scale, dtype=object))
    else:
        Nf, D = lifted
    dt = Nf.dtype if Nf.size else np.int64
    R = np.zeros((rank, n), dtype=dt if D < (1 << 62) else object)
    for i, c in enumerate(piv):
        R[i, c] = D
    if free:
        R[:, free] = Nf
    return Echelon(_as_int(R), D, list(piv), n)


def _common_denominator_lift(acc: np.ndarray, M: int, rounds: int = 4):
    """Candidate (numerators, D) with acc ≡ numerators/D (mod M), all small.

    The entries of an rref share most of their denominator (a pivot minor), so a few
    reconstructions give D, and one vectorised product D·acc mod M gives every numerator.
    A candidate is only a candidate: exact_rref checks it exactly.
    """
    flat = acc.ravel()
    nz = np.nonzero(flat)[0]
    if len(nz) == 0:
        return np.zeros(acc.shape, dtype=np.int64), 1
    half = M // 2
    limit = isqrt(M // 2)
    D = 1
    probe = nz[np.unique(np.linspace(0, len(nz) - 1, min(16, len(nz))).astype(np.int64))]
    for _ in range(rounds):
        for idx in probe.tolist():
            a = int(flat[idx]) * D % M
            r = _rr_one(a, M)
            if r is None:
                return None
            D *= r[1]
        if D > limit:
            return None
        y = _mulmod(acc, D, M)
        y = np.where(y > half, y - M, y)
        big = np.abs(y) > limit
        if not np.any(big):
            return _as_int(y), D
        probe = np.nonzero(big.ravel())[0][:16]
    return None


def _mulmod(A: np.ndarray, D: int, M: int) -> np.ndarray:
    if A.dtype != object and M < (1 << 31) and D < (1 << 31):
        return (A * D) % M
    return (A.astype(object) * D) % M


def _rr_one(a: int, M: int) -> tuple[int, int] | None:
    n, d, ok = rational_reconstruct(np.array([a], dtype=object if M >= 1 << 62 else np.int64), M)
    return (int(n[0]), int(d[0])) if ok[0] else None


def _div_array(D: int, d: np.ndarray) -> np.ndarray:
    if D < (1 << 62):
        return D // d
    return np.array([D // int(x) for x in d.ravel()], dtype=object).reshape(d.shape)


def _rowspace_check(Z: np.ndarray, E: Echelon) -> bool:
    """Z·den == Z[:, piv]·num, exactly (then rowspace Z ⊂ rowspace R)."""
    free = E.free
    if not free:
        return True
    small_z = Z.dtype != object and _absmax(Z) < (1 << 20)
    if E.piv and small_z and (E.free_digits is not None or E.num.dtype == object):
        return _rowspace_check_modular(Z, E)
    lhs = _scale(Z[:, free], E.den)
    rhs = int_matmul(Z[:, E.piv], E.num[:, free]) if E.piv else np.zeros_like(lhs)
    return bool(np.all(np.asarray(lhs, dtype=object) == np.asarray(rhs, dtype=object))) if (
        lhs.dtype == object or rhs.dtype == object) else bool(np.array_equal(lhs, rhs))


def _rowspace_check_modular(Z: np.ndarray, E: Echelon) -> bool:
    """The identity of ``_rowspace_check`` for a big echelon form, checked modulo primes
    whose product exceeds twice the bound on both sides (then it holds in Z).  Z is small,
    so the primes can be as large as 2^53/(row sum of Z): one exact float product per
    prime instead of big-integer limbs."""
    free = E.free
    A = Z[:, E.piv]
    digits = E.free_digits
    num = E.num[:, free] if digits is None else None
    ra = max(_rowabs_max(A), 1)
    nmax = digits.bound() if digits is not None else _absmax(num)
    bound = max(ra * nmax, _absmax(Z[:, free]) * int(E.den))
    top = 1 << min(50 if digits is None else 31, ((1 << 53) // (2 * ra)).bit_length() - 1)
    Af = A.astype(np.float64)
    Zf = Z[:, free].astype(np.int64)  # |Z|·ℓ < 2^62: the left side stays in int64
    prod = 1
    for ell in word_primes(top):
        lhs = np.mod(Zf * (int(E.den) % ell), ell)
        res = digits.mod(ell) if digits is not None else np.mod(num, ell).astype(np.int64)
        rhs = np.mod(Af @ res.astype(np.float64), ell)
        if not np.array_equal(lhs, rhs.astype(np.int64)):
            return False
        prod *= ell
        if prod > 2 * bound:
            return True
    return False  # pragma: no cover  (the generator is endless)


def exact_kernel(Z: np.ndarray) -> QMat:
    """Columns spanning the right kernel of an integer matrix, exactly (X[free] = I)."""
    return exact_rref(Z).kernel()


def qmat_kernel(A: QMat) -> QMat:
    """Right kernel of a rational matrix."""
    return exact_kernel(A.num)


def column_space(A: QMat) -> QMat:
    """Columns spanning the column space of A, in column echelon form (exact)."""
    E = exact_rref(_transpose(A.num))
    return QMat(_transpose(E.num), E.den).reduced()


def _transpose(Z: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(Z.T)


# -- characteristic polynomials with an eigenvalue bound ----------------------------------------


def charpoly_bounded(A: QMat, root_bound: int) -> flint.fmpz_poly:
    """charpoly of A ∈ M_s(Q) whose eigenvalues are algebraic integers of absolute value
    ≤ root_bound: multimodular (FLINT nmod_mat.charpoly) and CRT to the symmetric residue.

    The coefficient of x^(s−j) is bounded by C(s, j)·root_bound^j ≤ (1 + root_bound)^s,
    so primes whose product exceeds twice that give the exact polynomial.
    """
    s = A.shape[0]
    if s == 0:
        return flint.fmpz_poly([1])
    need = 2 * (1 + root_bound) ** s
    Z = fmpz_matrix(A.num)
    res: list[list[int]] = []
    mods: list[int] = []
    prod = 1
    for ell in word_primes(1 << 62):
        if A.den % ell == 0:
            continue
        Mt = flint.nmod_mat(Z, ell)
        if A.den != 1:
            Mt = Mt * pow(A.den % ell, -1, ell)
        res.append([int(c) for c in Mt.charpoly().coeffs()])
        mods.append(ell)
        prod *= ell
        if prod > need:
            break
    coeffs = []
    for i in range(s + 1):
        x = _crt_list([r[i] for r in res], mods)
        coeffs.append(x - prod if x > prod // 2 else x)
    return flint.fmpz_poly(coeffs)


def fmpz_matrix(Z: np.ndarray) -> flint.fmpz_mat:
    r, c = Z.shape
    if r == 0 or c == 0:
        return flint.fmpz_mat(r, c)
    return flint.fmpz_mat(r, c, [int(x) for x in Z.ravel()] if Z.dtype == object
                          else Z.ravel().tolist())


def residue_nmod_mat(A: np.ndarray, ell: int) -> flint.nmod_mat:
    """A residue (or any integer-valued float/int) array modulo ℓ as an nmod_mat.  Through
    fmpz_mat: FLINT builds that from Python ints about twice as fast as nmod_mat does
    from the same list (measured, python-flint 0.9)."""
    r, c = A.shape
    if r == 0 or c == 0:
        return flint.nmod_mat(r, c, ell)
    return flint.nmod_mat(flint.fmpz_mat(r, c, np.mod(A, ell).astype(np.int64).ravel().tolist()),
                          ell)


def nmod_matrix(A: QMat, ell: int) -> flint.nmod_mat:
    """A modulo ℓ as an nmod_mat (any word-size prime ℓ not dividing den)."""
    M = flint.nmod_mat(fmpz_matrix(A.num), ell)
    if A.den % ell != 1:
        M = M * pow(A.den % ell, -1, ell)
    return M


def _crt_list(res: list[int], mods: list[int]) -> int:
    x, m = 0, 1
    for r, q in zip(res, mods, strict=True):
        t = ((r - x) * pow(m, -1, q)) % q
        x += m * t
        m *= q
    return x
