"""Weighted moment sums of one cell, and estimates computed from them.

A bootstrap resample of a cell is a vector of counts (how often each
individual was drawn). Every linear and quadratic estimate of the resample
depends on the data only through count-weighted sums of products of the
features, so all resamples come from one matrix product
``counts @ features``. Traits are pre-centred and pre-scaled by fixed
constants (z~ = (z - m0) / s0) to keep those sums well conditioned; the
resample's own standardization x = (z~ - m) / s is applied afterwards by an
exact affine map of the moment matrices (an affine change of the traits spans
the same model, so nothing is approximated).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

from fieldslope.analysis.cells import Sample
from fieldslope.analysis.quadratic import quad_pairs

__all__ = ["Part", "FeatureMatrix", "MultiMoments", "SingleSums", "unpack_multi", "multi_moments",
           "batched_solve", "single_sums", "opp_sums"]


@dataclass
class Part:
    """Columns of one analysis in the cell's feature matrix, and the pre-scaling constants."""

    cols: slice
    m0: np.ndarray
    s0: np.ndarray
    w0: float
    rows: np.ndarray


def prescale(sample: Sample) -> tuple[np.ndarray, np.ndarray, np.ndarray, float, np.ndarray]:
    m0 = sample.z.mean(axis=0)
    s0 = sample.z.std(axis=0)
    s0 = np.where(s0 > 0, s0, 1.0)
    w0 = float(sample.W.mean())
    return (sample.z - m0) / s0, m0, s0, w0, sample.W / w0


def poly_features(zt: np.ndarray) -> np.ndarray:
    """phi(z) = [1, z_1..z_p, z_j z_k (j <= k)] for each row."""
    n, p = zt.shape
    quad = [zt[:, j] * zt[:, k] for j, k in quad_pairs(p)]
    return np.column_stack([np.ones(n), zt, *quad])


def multi_columns(zt: np.ndarray, wt: np.ndarray, quadratic: bool) -> np.ndarray:
    """Products phi_a phi_b (a <= b) then phi_a W~, then W~^2."""
    phi = poly_features(zt) if quadratic else np.column_stack([np.ones(len(zt)), zt])
    a, b = np.triu_indices(phi.shape[1])
    return np.column_stack([phi[:, a] * phi[:, b], phi * wt[:, None], wt**2])


def single_columns(zt: np.ndarray, wt: np.ndarray) -> np.ndarray:
    """[1, z~, z~^2, W~, z~ W~] for one trait."""
    z = zt[:, 0]
    return np.column_stack([np.ones(len(z)), z, z**2, wt, z * wt])


def opp_columns(wt: np.ndarray) -> np.ndarray:
    return np.column_stack([np.ones(len(wt)), wt, wt**2])


class FeatureMatrix:
    """The cell's feature matrix (individuals x columns), built part by part and never held whole.

    Each part is kept as a recipe, ``make(i0, i1)``: its columns for the entries i0:i1 of its sample (rows
    ``rows`` of the cell, sorted; zero elsewhere), computed from per-individual values by elementwise
    arithmetic only, so any slab of rows has exactly the numbers of the whole. Columns that repeat an
    earlier one exactly (the constant, a trait's powers shared by several fitness measures) are kept once:
    ``slab(lo, hi)`` holds the distinct columns of cell rows lo:hi and ``columns`` says which distinct
    column each position is, so ``(C @ slab)[:, columns]`` summed over slabs are the moment sums of every
    position. Memory is that of the recipes' inputs (a few numbers per individual), not n x columns."""

    def __init__(self, n_rows: int):
        self.n_rows = n_rows
        self.groups: list[tuple[np.ndarray, object]] = []  # (rows, make) per part
        self.source: list[tuple[int, int]] = []  # distinct column -> (part, its column there)
        self.where: list[int] = []
        self.seen: dict[bytes, int] = {}
        self.width = 0

    def add(self, sample: Sample, kind: str, quadratic: bool = True) -> Part:
        _, m0, s0, w0, _ = prescale(sample)

        def make(i0: int, i1: int) -> np.ndarray:
            zt, wt = (sample.z[i0:i1] - m0) / s0, sample.W[i0:i1] / w0
            if kind == "multi":
                return multi_columns(zt, wt, quadratic)
            if kind == "single":
                return single_columns(zt, wt)
            return opp_columns(wt)

        return Part(self.add_columns(sample.rows, make), m0, s0, w0, sample.rows)

    def add_columns(self, rows: np.ndarray, make) -> slice:
        """Columns ``make(i0, i1)`` of the entries i0:i1 of ``rows`` (sorted cell rows; zero elsewhere);
        returns where they sit."""
        cols = make(0, len(rows))
        group = len(self.groups)
        self.groups.append((rows, make))
        full = np.zeros(self.n_rows)
        for j in range(cols.shape[1]):
            full[rows] = cols[:, j]
            self.where.append(self.place(full, group, j))
        self.width += cols.shape[1]
        return slice(self.width - cols.shape[1], self.width)

    def place(self, col: np.ndarray, group: int, j: int) -> int:
        """Index of the distinct column equal to ``col`` (by a 128-bit digest of its bytes), added if new."""
        key = hashlib.blake2b(col.tobytes(), digest_size=16).digest()
        if key not in self.seen:
            self.seen[key] = len(self.source)
            self.source.append((group, j))
        return self.seen[key]

    @property
    def columns(self) -> np.ndarray:
        return np.array(self.where, dtype=np.intp)

    @property
    def distinct(self) -> int:
        return len(self.source)

    def slab(self, lo: int, hi: int) -> np.ndarray:
        """The distinct columns of cell rows lo:hi ((hi - lo) x distinct columns)."""
        out = np.zeros((hi - lo, len(self.source)))
        wanted: dict[int, tuple[list[int], list[int]]] = {}
        for i, (g, j) in enumerate(self.source):
            wanted.setdefault(g, ([], []))
            wanted[g][0].append(i)
            wanted[g][1].append(j)
        for g, (dest, cols) in wanted.items():
            rows, make = self.groups[g]
            i0, i1 = np.searchsorted(rows, [lo, hi])
            if i1 > i0:
                out[np.ix_(rows[i0:i1] - lo, dest)] = make(int(i0), int(i1))[:, cols]
        return out

    def matrix(self) -> np.ndarray:
        """The whole matrix of distinct columns (individuals x distinct columns): for checks and small cells."""
        return self.slab(0, self.n_rows)


# ----- from moment sums to estimates ---------------------------------------------------------


def unpack_multi(M: np.ndarray, d: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Moment matrix (B x d x d), fitness moments (B x d) and sum of W~^2 from packed sums.

    Parameters: packed sums ``M`` and the feature count ``d``. Source: none (bookkeeping, no published
    method).
    """
    a, b = np.triu_indices(d)
    k = len(a)
    Mz = np.empty((M.shape[0], d, d))
    Mz[:, a, b] = M[:, :k]
    Mz[:, b, a] = M[:, :k]
    return Mz, M[:, k : k + d], M[:, k + d]


def affine_map(n: np.ndarray, s1: np.ndarray, s2: np.ndarray, p: int, quadratic: bool):
    """T (B x d x d) with phi(x) = T phi(z~) for x = (z~ - m)/s, m and s (ddof 1) from the sums.

    Returns T, s (B x p) and a mask of resamples where every s is positive.
    """
    m = s1 / n[:, None]
    var = (s2 - n[:, None] * m**2) / (n[:, None] - 1)
    ok = np.all(var > 1e-14, axis=1) & (n > p + 1)
    s = np.sqrt(np.where(var > 1e-14, var, 1.0))
    a = 1.0 / s
    c = -m / s
    B = len(n)
    pairs = quad_pairs(p) if quadratic else []
    d = 1 + p + len(pairs)
    T = np.zeros((B, d, d))
    T[:, 0, 0] = 1.0
    for j in range(p):
        T[:, 1 + j, 1 + j] = a[:, j]
        T[:, 1 + j, 0] = c[:, j]
    for i, (j, k) in enumerate(pairs):
        r = 1 + p + i
        h = 0.5 if j == k else 1.0
        T[:, r, r] = h * a[:, j] * a[:, k]
        T[:, r, 1 + j] += h * a[:, j] * c[:, k]
        T[:, r, 1 + k] += h * c[:, j] * a[:, k]
        T[:, r, 0] = h * c[:, j] * c[:, k]
    return T, s, ok


@dataclass
class MultiMoments:
    """Standardized-scale normal equations of one cell for a batch of resamples."""

    Mx: np.ndarray  # B x d x d: sum of counts * phi(x) phi(x)'
    vx: np.ndarray  # B x d: sum of counts * phi(x) * w
    T: np.ndarray  # B x d x d
    n: np.ndarray  # B
    sd: np.ndarray  # B x p, raw trait units
    ok: np.ndarray  # B, usable resamples


def multi_moments(M: np.ndarray, part: Part, p: int, quadratic: bool) -> MultiMoments:
    """The moments of a multi-trait part for every resample, on the resample's standardized scale. Parameters:
    packed sums ``M``, the ``part``, the trait count and whether quadratic. Returns ``MultiMoments``. Source:
    the bootstrap as weighted moments, Efron & Tibshirani 1993, An Introduction to the Bootstrap.
    """
    d = 1 + p + (len(quad_pairs(p)) if quadratic else 0)
    Mz, vz, _ = unpack_multi(M[:, part.cols], d)
    n = Mz[:, 0, 0]
    T, s, ok = affine_map(n, Mz[:, 0, 1 : 1 + p], Mz[:, 1 + np.arange(p), 1 + np.arange(p)], p, quadratic)
    mW = vz[:, 0] / np.where(n > 0, n, 1.0)
    ok &= mW > 0
    mW = np.where(mW > 0, mW, 1.0)
    Mx = T @ Mz @ np.swapaxes(T, 1, 2)
    vx = np.einsum("bij,bj->bi", T, vz) / mW[:, None]
    return MultiMoments(Mx, vx, T, n, s * part.s0, ok)


def batched_solve(A: np.ndarray, b: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Solve A x = b for each resample; NaN where a system is unusable or singular.

    Parameters: systems ``A`` (B x d x d), right sides ``b`` (B x d) and a usable mask. Returns the solutions
    (B x d). Source: none (bookkeeping, no published method).
    """
    A = A.copy()
    b = b.copy()
    eye = np.eye(A.shape[-1])
    A[~ok] = eye
    b[~ok] = 0.0
    try:
        x = np.linalg.solve(A, b[..., None])[..., 0]
    except np.linalg.LinAlgError:
        x = np.full(b.shape, np.nan)
        for i in range(len(A)):
            try:
                x[i] = np.linalg.solve(A[i], b[i])
            except np.linalg.LinAlgError:
                pass
    x[~ok] = np.nan
    return x


@dataclass
class SingleSums:
    """Count-weighted sums for one trait in one cell (pre-scaled units)."""

    n: np.ndarray
    m: np.ndarray  # mean of z~
    s: np.ndarray  # sd of z~ (ddof 1)
    S_num: np.ndarray  # sum z~ w - sum z~, to be scaled by s0 (raw) or 1/s (standardized)
    s0: float
    ok: np.ndarray


def single_sums(M: np.ndarray, part: Part) -> SingleSums:
    """The sums of a one-trait part for every resample. Parameters: packed sums ``M`` and the ``part``. Returns
    ``SingleSums``. Source: the bootstrap as weighted moments, Efron & Tibshirani 1993, An Introduction to the
    Bootstrap.
    """
    n, sz, sz2, sw, szw = (M[:, part.cols][:, i] for i in range(5))
    n_safe = np.where(n > 1, n, 2.0)
    m = sz / n_safe
    var = (sz2 - n_safe * m**2) / (n_safe - 1)
    mW = sw / n_safe
    ok = (n > 1) & (var > 1e-14) & (mW > 0)
    mW = np.where(mW > 0, mW, 1.0)
    return SingleSums(n, m, np.sqrt(np.where(var > 0, var, 1.0)), szw / mW - sz, float(part.s0[0]), ok)


def opp_sums(M: np.ndarray, part: Part) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(n, sum of w^2 with w relativized in the resample, usable mask).

    Parameters: packed sums ``M`` and the ``part``. Source: opportunity for selection, Arnold & Wade 1984
    (Evolution 38:709-719).
    """
    n, sw, sw2 = (M[:, part.cols][:, i] for i in range(3))
    ok = sw > 0
    sw = np.where(ok, sw, 1.0)
    return n, sw2 * n**2 / sw**2, ok
