"""Bootstrap resamples and permutations of one season, vectorized across resamples.

Bootstrap: individuals are resampled within each cell (one count vector per
cell and resample, shared by every fitness measure and analysis of that
cell); fitness is re-relativized and traits re-standardized in every
resample. The pooled estimate of resample b uses resample b of every cell.
Linear and quadratic estimates come from count-weighted moment sums (one
matrix product per cell and chunk, see ``moments``); logistic fits from a
batched Newton iteration with the counts as weights.
"""

from __future__ import annotations

import zlib
from itertools import combinations_with_replacement

import numpy as np

from fieldslope.analysis.cells import Prepared
from fieldslope.analysis.generalized_resample import BlockBootstrap
from fieldslope.analysis.logistic import Separation, batched_logistic, fit_logistic, taylor_start
from fieldslope.analysis.moments import (
    FeatureMatrix,
    MultiMoments,
    batched_solve,
    multi_moments,
    opp_sums,
    single_sums,
    unpack_multi,
)
from fieldslope.analysis.point import stack, with_intercept
from fieldslope.analysis.quadratic import canonical_axes, gamma_matrix, quad_pairs, quad_terms
from fieldslope.common.names import ALL, Q

__all__ = ["CHUNK", "draw_counts", "counts_from_indices", "chunk_rng", "SeasonResampler", "bootstrap_season",
           "percentile_interval", "PHENOTYPIC_COV", "CANONICAL_AXES"]

# key of the replicates of the phenotypic covariance matrix (B x p x p) of a block's complete cases (for
# the interval of the multivariate response; no row of the table)
PHENOTYPIC_COV = "phenotypic covariance"
# key of the replicates of the eigenvectors of gamma (B x p x p, columns largest eigenvalue first; signs as
# they come: ``canonical_interval`` aligns them with the estimate's)
CANONICAL_AXES = "canonical axes"
# resamples drawn from one random stream (``chunk_rng``): fixed, so a seed gives the same resamples at any n
CHUNK = 200
# bytes of counts worked on at once while resampling: a stream's resamples are split into blocks of
# resamples so that the counts (and their copies in the logistic fits) stay near this size, whatever n is
MEMORY_BUDGET = 128 * 2**20


def draw_counts(rng: np.random.Generator, n: int, size: int, dtype=np.float64) -> np.ndarray:
    """How often each of ``n`` individuals is drawn in each of ``size`` resamples of n draws (size x n).

    The draws are the same whatever ``dtype`` (float, or uint8 to keep a whole stream's counts small);
    for n > 65,535 they are made a few resamples at a time (numpy's 32-bit draws continue one stream
    across calls), so the drawn indices never take more than about MEMORY_BUDGET / 4 bytes.

    Parameters: a Generator, ``n``, ``size`` and the dtype. Returns the counts. Source: the nonparametric
    bootstrap, Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 6.
    """
    state = rng.bit_generator.state
    small = n <= np.iinfo(np.uint16).max
    # small integer draws and one bincount per resample: about twice as fast as one big bincount
    step = size if small else max(1, min(size, MEMORY_BUDGET // (16 * n)))
    out = np.empty((size, n), dtype=dtype)
    top = np.iinfo(dtype).max if np.issubdtype(dtype, np.integer) else np.inf
    for lo in range(0, size, step):
        idx = rng.integers(0, n, size=(min(step, size - lo), n), dtype=np.uint16 if small else np.uint32)
        for b, row in enumerate(idx, start=lo):
            count = np.bincount(row, minlength=n)
            if top < np.inf and count.max() > top:  # never seen with uint8 (a count above 255 in n draws of n): redraw as floats
                rng.bit_generator.state = state
                return draw_counts(rng, n, size)
            out[b] = count
    return out


def counts_from_indices(indices: np.ndarray, n: int) -> np.ndarray:
    """Counts matrix for given resample indices (size x n draws each); for checks against plain loops.

    Parameters: drawn ``indices`` and ``n``. Source: none (bookkeeping, no published method).
    """
    size = indices.shape[0]
    flat = (indices + (np.arange(size) * n)[:, None]).ravel()
    return np.bincount(flat, minlength=size * n).reshape(size, n).astype(np.float64)


def chunk_rng(seed: int, season: str, stream: int, chunk: int) -> np.random.Generator:
    """Generator for one chunk: depends only on seed, season name, stream (0 bootstrap, 1 permutation) and chunk.

    Parameters: as named. Returns a numpy Generator. Source: none (bookkeeping, no published method).
    """
    return np.random.default_rng(np.random.SeedSequence([seed, zlib.crc32(season.encode()), stream, chunk]))


class SeasonResampler:
    """Replicate estimates of one season's cells (and their pooled block) for chunks of resamples."""

    def __init__(self, preps: dict[str, list[Prepared]], traits: tuple[str, ...], pooled: bool, logistic_blocks: set,
                 glm_specs: dict | None = None, cells: set[int] | None = None):
        """``cells`` (default all) are the cells whose replicates are wanted; the counts of every cell are
        drawn all the same (``bootstrap_season``), so the resamples of those wanted stay those of the seed."""
        self.preps = preps  # fitness -> one Prepared per cell (cells in the same order)
        self.traits = traits
        self.p = len(traits)
        self.pooled = pooled
        first = next(iter(preps.values()))
        self.sites = [pr.cell.site for pr in first]
        self.n_cells = [len(pr.cell.z) for pr in first]
        self.features: list = []
        self.parts: list[dict] = []
        for c in range(len(self.sites)):
            if cells is not None and c not in cells:      # not wanted: no features, no moment product
                self.features.append(None)
                self.parts.append({})
                continue
            fm = FeatureMatrix(self.n_cells[c])
            parts = {}
            for f, plist in preps.items():
                pr = plist[c]
                if pr.opp is not None:
                    parts[(f, "opp")] = fm.add(pr.opp, "opp")
                for j, s in enumerate(pr.single):
                    if s is not None:
                        parts[(f, "single", j)] = fm.add(s, "single")
                if pr.multi is not None:
                    parts[(f, "multi")] = fm.add(pr.multi, "multi", quadratic=True)
            self.features.append(fm)
            self.parts.append(parts)
        # logistic starting values (standardized scale) per block, and the features of a first
        # Newton step taken at those values, so the step comes out of the moment product
        self.logit_start: dict[tuple[str, str], np.ndarray] = {}
        self.logit_theta: dict[tuple[str, str, int], np.ndarray] = {}
        for site, f in sorted(logistic_blocks):
            block = self.block_cells(f, site)
            samples = [self.preps[f][c].multi for c in block]
            _, x, _, W = stack(samples)
            try:
                beta = fit_logistic(with_intercept(x), W).coef
            except Separation:
                continue
            self.logit_start[(site, f)] = beta
            for c in block:
                self.add_first_step(site, f, c, beta)
        # generalized gradients (0/1 and count fitness): batched fits of their own, on the same resamples
        self.glm = BlockBootstrap(glm_specs or {}, preps, self.parts, self.features, traits, self.block_cells)
        self.expand = [None if fm is None else fm.columns for fm in self.features]  # position -> distinct column

    def add_first_step(self, site: str, f: str, c: int, beta: np.ndarray) -> None:
        """Columns p(1-p) x~_a x~_b, (y - p) x~ and p(1-p)(1-2p) x~_a x~_b x~_c (a <= b <= c) at the
        block's estimate, on the cell's complete cases: a Taylor model of each resample's likelihood
        equations to third order, whose root starts the batched Newton iteration."""
        part = self.parts[c][(f, "multi")]
        s = self.preps[f][c].multi
        Xt = with_intercept((s.z - part.m0) / part.s0)
        m, sd = Xt[:, 1:].mean(axis=0), Xt[:, 1:].std(axis=0, ddof=1)
        theta = np.concatenate([[beta[0] - np.sum(beta[1:] * m / sd)], beta[1:] / sd])  # same eta on X~
        p_hat = 1 / (1 + np.exp(-(Xt @ theta)))
        a, b = np.triu_indices(Xt.shape[1])
        pq = p_hat * (1 - p_hat)
        i, j, l = np.array(list(combinations_with_replacement(range(Xt.shape[1]), 3))).T

        def make(i0: int, i1: int) -> np.ndarray:  # elementwise from the kept p_hat: any slab, the same numbers
            X, ph, q = Xt[i0:i1], p_hat[i0:i1], pq[i0:i1]
            return np.column_stack([q[:, None] * X[:, a] * X[:, b], (s.W[i0:i1] - ph)[:, None] * X,
                                    (q * (1 - 2 * ph))[:, None] * X[:, i] * X[:, j] * X[:, l]])

        self.parts[c][(f, "logit", site)] = self.features[c].add_columns(s.rows, make)
        self.logit_theta[(site, f, c)] = theta

    def block_cells(self, f: str, site: str) -> list[int]:
        if site == ALL:
            return [c for c in range(len(self.sites)) if self.preps[f][c].multi is not None]
        return [self.sites.index(site)]

    # ----- bootstrap --------------------------------------------------------------------------

    def stream_moments(self, counts: list[np.ndarray]) -> list[np.ndarray | None]:
        """The moment sums C @ F of every cell (distinct columns) for counts given as bytes (B x n each),
        worked out a slab of individuals at a time (each slab of F made from its recipes, ``FeatureMatrix.slab``):
        the slab's counts as floats and its features each stay near half of MEMORY_BUDGET, F is never held
        whole, and each slab serves all B resamples however large n is."""
        out: list[np.ndarray | None] = []
        for C, fm in zip(counts, self.features):
            if fm is None:
                out.append(None)
                continue
            rows = max(1, MEMORY_BUDGET // (16 * max(len(C), fm.distinct, 1)))  # each half of the budget
            M = None
            for lo in range(0, C.shape[1], rows):
                part = C[:, lo : lo + rows].astype(np.float64) @ fm.slab(lo, min(lo + rows, C.shape[1]))
                M = part if M is None else M + part
            out.append(M)
        return out

    def boot_chunk(self, counts: list[np.ndarray], sums: list[np.ndarray | None] | None = None) -> dict[tuple, np.ndarray]:
        """Replicates keyed (site, fitness, quantity, term) for counts (one B x n matrix per cell); ``sums``
        may give their moment sums C @ F (``stream_moments``) when worked out already."""
        out: dict[tuple, np.ndarray] = {}
        if sums is None:
            sums = self.stream_moments(counts)
        moments = [None if M is None else M[:, cols] for M, cols in zip(sums, self.expand)]
        for f in self.preps:
            self.boot_opp(f, moments, out)
            self.boot_single(f, moments, out)
            mm = {c: multi_moments(moments[c], self.parts[c][(f, "multi")], self.p, True)
                  for c in range(len(self.sites)) if (f, "multi") in self.parts[c]}
            blocks = [(self.sites[c], [c]) for c in mm]
            if self.pooled and mm:
                blocks.append((ALL, list(mm)))
            for site, cs in blocks:
                self.boot_multi(f, site, [mm[c] for c in cs], out)
                if (site, f) in self.logit_start:
                    self.boot_logistic(f, site, cs, counts, mm, moments, out)
                self.glm.chunk(f, site, cs, counts, moments, mm, out)
        return out

    def boot_opp(self, f, moments, out):
        tot_n, tot_w2, tot_ok = 0.0, 0.0, True
        for c, site in enumerate(self.sites):
            part = self.parts[c].get((f, "opp"))
            if part is None:
                continue
            n, w2, ok = opp_sums(moments[c], part)
            out[(site, f, Q.OPPORTUNITY, "")] = np.where(ok, w2 / n - 1, np.nan)
            tot_n, tot_w2, tot_ok = tot_n + n, tot_w2 + w2, tot_ok & ok
        if self.pooled and not np.isscalar(tot_n):
            out[(ALL, f, Q.OPPORTUNITY, "")] = np.where(tot_ok, tot_w2 / tot_n - 1, np.nan)

    def boot_single(self, f, moments, out):
        for j, name in enumerate(self.traits):
            tot = None
            for c, site in enumerate(self.sites):
                part = self.parts[c].get((f, "single", j))
                if part is None:
                    continue
                ss = single_sums(moments[c], part)
                raw, std = ss.s0 * ss.S_num, ss.S_num / ss.s
                out[(site, f, Q.DIFFERENTIAL, name)] = np.where(ss.ok, raw / ss.n, np.nan)
                out[(site, f, Q.DIFFERENTIAL_STD, name)] = np.where(ss.ok, std / ss.n, np.nan)
                add = np.array([raw, std, ss.n, np.where(ss.ok, 0.0, np.nan)])
                tot = add if tot is None else tot + add
            if self.pooled and tot is not None:
                out[(ALL, f, Q.DIFFERENTIAL, name)] = tot[0] / tot[2] + tot[3]
                out[(ALL, f, Q.DIFFERENTIAL_STD, name)] = tot[1] / tot[2] + tot[3]

    def boot_multi(self, f, site, mms: list[MultiMoments], out):
        p = self.p
        Mx = sum(m.Mx for m in mms)
        vx = sum(m.vx for m in mms)
        ok = np.logical_and.reduce([m.ok for m in mms])
        dof = sum(m.n - 1 for m in mms)
        sd = np.sqrt(sum((m.n - 1)[:, None] * m.sd**2 for m in mms) / dof[:, None])
        lin = batched_solve(Mx[:, : 1 + p, : 1 + p], vx[:, : 1 + p], ok)[:, 1:]
        # phenotypic covariance of the complete cases (raw units; pooled within cells): sum C x x' = (n - 1)
        # times the correlation in each cell, x standardized in the resample
        cov = sum(m.sd[:, :, None] * m.sd[:, None, :] * m.Mx[:, 1 : 1 + p, 1 : 1 + p] for m in mms) / dof[:, None, None]
        out[(site, f, PHENOTYPIC_COV, "")] = np.where(ok[:, None, None], cov, np.nan)
        for j, name in enumerate(self.traits):
            out[(site, f, Q.GRADIENT, name)] = lin[:, j]
            out[(site, f, Q.GRADIENT_RAW, name)] = lin[:, j] / sd[:, j]
        quad = batched_solve(Mx, vx, ok)[:, 1 + p :]
        self.put_quadratic(site, f, quad, out)

    def put_quadratic(self, site, f, quad, out):
        for (j, k), term, col in zip(quad_pairs(self.p), quad_terms(self.traits), quad.T):
            out[(site, f, Q.QUADRATIC if j == k else Q.CORRELATIONAL, term)] = col
        good = np.all(np.isfinite(quad), axis=1)
        g = gamma_matrix(np.where(good[:, None], quad, 0.0), self.p)
        vals, vecs = canonical_axes(g)
        vals[~good] = np.nan
        vecs[~good] = np.nan
        for i in range(self.p):
            out[(site, f, Q.CANONICAL, f"m{i + 1}")] = vals[:, i]
        out[(site, f, CANONICAL_AXES, "")] = vecs

    def logit_sums(self, f, c, moments) -> np.ndarray:
        """[sum C y x~, sum C y, sum C] of a cell's complete cases, from the linear-model moments."""
        part = self.parts[c][(f, "multi")]
        k = 1 + self.p
        Mz, vz, _ = unpack_multi(moments[c][:, part.cols], k + len(quad_pairs(self.p)))
        yx = vz[:, :k] * part.w0  # W~ = W / w0
        return np.column_stack([yx, yx[:, 0], Mz[:, 0, 0]])

    def boot_logistic(self, f, site, cs, counts, mm, moments, out):
        k = 1 + self.p
        n_pairs = k * (k + 1) // 2
        a, b = np.triu_indices(k)
        beta0 = self.logit_start[(site, f)]
        cells, terms = [], []
        for c in cs:
            part = self.parts[c][(f, "multi")]
            pr = self.preps[f][c]
            zt = (pr.multi.z - part.m0) / part.s0
            T = mm[c].T[:, :k, :k]
            C = counts[c] if len(part.rows) == counts[c].shape[1] else counts[c][:, part.rows]  # rows are sorted
            cells.append((with_intercept(zt), pr.multi.W, C, T))
            M = moments[c][:, self.parts[c][(f, "logit", site)]]
            Hz = np.empty((len(M), k, k))
            Hz[:, a, b] = M[:, :n_pairs]
            Hz[:, b, a] = M[:, :n_pairs]
            terms.append((T, self.logit_theta[(site, f, c)], Hz, M[:, n_pairs : n_pairs + k], M[:, n_pairs + k :]))
        ok = np.logical_and.reduce([mm[c].ok for c in cs])
        start = taylor_start(beta0, terms, ok)
        beta, mean_pq, mean_w, ok2 = batched_logistic(cells, start, sums=[self.logit_sums(f, c, moments) for c in cs])
        ok &= ok2
        grad = beta[:, 1:] * (mean_pq / mean_w)[:, None]
        grad[~ok] = np.nan
        for j, name in enumerate(self.traits):
            out[(site, f, Q.GRADIENT_LOGISTIC, name)] = grad[:, j]


def block_size(n_total: int, budget: int = MEMORY_BUDGET) -> int:
    """Resamples worked on at once for a season of ``n_total`` individuals: counts of about ``budget`` bytes."""
    return max(1, min(CHUNK, budget // (8 * max(n_total, 1))))


def bootstrap_season(resampler: SeasonResampler, season: str, B: int, seed: int, tick) -> dict[tuple, np.ndarray]:
    """All bootstrap replicates of a season; ``tick(k)`` after each block of k resamples.

    Resamples are drawn CHUNK at a time from one stream each (``chunk_rng``) and worked on in blocks
    of ``block_size`` resamples; when a block is smaller than a stream, the stream's counts are kept
    as bytes until their block's turn, and the moment product of the whole stream is taken slab by slab
    of individuals (``stream_moments``), so memory stays near MEMORY_BUDGET and the cost grows linearly
    with n (the features are read once per stream, not once per block), while the resamples stay those
    of the seed.

    Parameters: a ``SeasonResampler``, the season, resamples ``B``, the seed and ``tick``. Returns key -> B
    replicates. Source: resampling individuals within cells, Efron & Tibshirani 1993, An Introduction to the
    Bootstrap.
    """
    pieces: dict[tuple, list[np.ndarray]] = {}
    block = block_size(sum(resampler.n_cells))
    for i, start in enumerate(range(0, B, CHUNK)):
        size = min(CHUNK, B - start)
        rng = chunk_rng(seed, season, 0, i)
        compact = block < size
        counts = [draw_counts(rng, n, size, np.uint8 if compact else np.float64) for n in resampler.n_cells]
        sums = resampler.stream_moments(counts) if compact else None
        for lo in range(0, size, block):
            part = [c[lo : lo + block].astype(np.float64) for c in counts] if compact else counts
            got = resampler.boot_chunk(part, None if sums is None else
                                       [None if M is None else M[lo : lo + block] for M in sums])
            for key, val in got.items():
                pieces.setdefault(key, []).append(val)
            tick(len(part[0]))
    return {k: np.concatenate(v) for k, v in pieces.items()}


def percentile_interval(replicates: np.ndarray) -> tuple[float, float, int]:
    """95 % percentile interval over the usable replicates, and how many were unusable.

    Parameters: the replicates. Returns (low, high, unusable count); NaN bounds when over 5 % are unusable.
    Source: Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13.
    """
    good = replicates[np.isfinite(replicates)]
    bad = len(replicates) - len(good)
    if len(good) < 0.95 * len(replicates) or len(good) < 2:
        return float("nan"), float("nan"), bad
    lo, hi = np.quantile(good, [0.025, 0.975])
    return float(lo), float(hi), bad
