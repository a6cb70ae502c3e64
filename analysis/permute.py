"""Permutation tests: fitness shuffled among the individuals of each cell.

Traits (and hence the standardized design) stay fixed under permutation, so
every linear and quadratic statistic of all permutations comes from one
matrix product of the permuted fitness vectors with the fixed design.
The logistic gradient's statistic is the score (one Newton step from the
no-selection fit), which for 0/1 fitness is proportional to the linear
gradient, so its p-value is the linear gradient's.
"""

from __future__ import annotations

import numpy as np

from fieldslope.analysis.cells import Prepared
from fieldslope.analysis.point import with_intercept
from fieldslope.analysis.quadratic import canonical_axes, gamma_matrix, quad_features, quad_pairs, quad_terms
from fieldslope.common.names import ALL, Q


def standardized(z: np.ndarray) -> np.ndarray:
    return (z - z.mean(axis=0)) / z.std(axis=0, ddof=1)


class SeasonPermuter:
    def __init__(self, preps: dict[str, list[Prepared]], traits: tuple[str, ...], pooled: bool):
        self.preps = preps
        self.traits = traits
        self.p = len(traits)
        self.pooled = pooled
        first = next(iter(preps.values()))
        self.sites = [pr.cell.site for pr in first]
        # fixed designs of the complete cases: [1, x, quadratic features]
        self.design = {}
        for f, plist in preps.items():
            for c, pr in enumerate(plist):
                if pr.multi is not None:
                    x = standardized(pr.multi.z)
                    self.design[(f, c)] = with_intercept(np.column_stack([x, quad_features(x)]))

    def statistics(self, fitness_of) -> dict[tuple, np.ndarray]:
        """Statistics for fitness vectors ``fitness_of(f, c, sample)`` (P x n each), keyed like the table.

        All statistics of one sample of rows come from one matrix product of
        the permuted fitness with the columns they need.
        """
        out: dict[tuple, np.ndarray] = {}
        p, d = self.p, 1 + self.p + len(quad_pairs(self.p))
        for f, plist in self.preps.items():
            single: dict[int, list] = {j: [] for j in range(p)}  # per trait: (raw, std, n) of each cell
            U, XtX = {}, {}
            for c, pr in enumerate(plist):
                groups: dict[bytes, tuple] = {}  # rows -> (sample, [columns], [(what, j)])
                for j, s in enumerate(pr.single or []):
                    if s is None:
                        continue
                    z = s.z[:, 0]
                    g = groups.setdefault(s.rows.tobytes(), (s, [], []))
                    g[1].extend([z, (z - z.mean()) / z.std(ddof=1)])
                    g[2].append(("single", j))
                if (f, c) in self.design:
                    g = groups.setdefault(pr.multi.rows.tobytes(), (pr.multi, [], []))
                    g[1].extend(self.design[(f, c)].T)
                    g[2].append(("multi", None))
                for s, cols, uses in groups.values():
                    prod = fitness_of(f, c, s) @ np.column_stack(cols) / s.W.mean()
                    sums = np.array([col.sum() for col in cols])
                    at = 0
                    for what, j in uses:
                        if what == "single":
                            raw, std = prod[:, at] - sums[at], prod[:, at + 1] - sums[at + 1]
                            n = len(s.W)
                            out[(self.sites[c], f, Q.DIFFERENTIAL, self.traits[j])] = raw / n
                            out[(self.sites[c], f, Q.DIFFERENTIAL_STD, self.traits[j])] = std / n
                            single[j].append((raw, std, n))
                            at += 2
                        else:
                            X = self.design[(f, c)]
                            U[c] = prod[:, at : at + d]
                            XtX[c] = X.T @ X
                            at += d
            if self.pooled:
                for j, parts in single.items():
                    if parts:
                        N = sum(n for _, _, n in parts)
                        out[(ALL, f, Q.DIFFERENTIAL, self.traits[j])] = sum(r for r, _, _ in parts) / N
                        out[(ALL, f, Q.DIFFERENTIAL_STD, self.traits[j])] = sum(s for _, s, _ in parts) / N
            blocks = [(self.sites[c], [c]) for c in U]
            if self.pooled and U:
                blocks.append((ALL, list(U)))
            for site, cs in blocks:
                self.model_statistics(site, f, sum(U[c] for c in cs), sum(XtX[c] for c in cs), out)
        return out

    def model_statistics(self, site, f, u, A, out) -> None:
        """Gradients, quadratic terms and canonical values from X'w (u, P x d) and X'X (A)."""
        p = self.p
        try:
            lin = np.linalg.solve(A[: 1 + p, : 1 + p], u[:, : 1 + p].T).T[:, 1:]
            quad = np.linalg.solve(A, u.T).T[:, 1 + p :]
        except np.linalg.LinAlgError:
            return
        for j, name in enumerate(self.traits):
            for q in (Q.GRADIENT, Q.GRADIENT_RAW, Q.GRADIENT_LOGISTIC):
                out[(site, f, q, name)] = lin[:, j]
        for (j, k), term, col in zip(quad_pairs(p), quad_terms(self.traits), quad.T):
            out[(site, f, Q.QUADRATIC if j == k else Q.CORRELATIONAL, term)] = col
        vals, _ = canonical_axes(gamma_matrix(quad, p))
        for i in range(p):
            out[(site, f, Q.CANONICAL, f"m{i + 1}")] = vals[:, i]

    def observed(self) -> dict[tuple, float]:
        stats = self.statistics(lambda f, c, s: s.W[None, :])
        return {k: float(v[0]) for k, v in stats.items()}

    def chunk(self, rng: np.random.Generator, size: int) -> dict[tuple, np.ndarray]:
        """Statistics of ``size`` permutations of fitness within each cell."""
        cache: dict[tuple, np.ndarray] = {}

        def fitness_of(f, c, s):
            key = (f, c, s.rows.tobytes())
            if key not in cache:
                cache[key] = shuffled(rng, s.W, size)
            return cache[key]

        return self.statistics(fitness_of)


# fitness with at most this many distinct values is shuffled by ranks of random keys (below);
# measured no faster than a direct shuffle from about eight values on
MAX_LEVELS = 4


def shuffled(rng: np.random.Generator, W: np.ndarray, size: int) -> np.ndarray:
    """``size`` independent uniform random permutations of ``W`` (size x n).

    For fitness with few distinct values (0/1 survival, small counts) the i-th
    entry is the value whose block of ranks holds the rank of a uniform key
    u_i: the keys' ranks are a uniform random permutation, so this is a
    uniform shuffle, found by one partial sort (np.partition) of 32-bit keys
    instead of a full Fisher-Yates pass (about three times as fast). Rows
    where keys tie at a block edge (about n in 4e9) are shuffled directly;
    that event does not depend on the order, so the result stays uniform.
    """
    values, counts = np.unique(W, return_counts=True)
    n = len(W)
    if not 2 <= len(values) <= MAX_LEVELS:
        return rng.permuted(np.broadcast_to(W, (size, n)), axis=1)
    u = rng.integers(0, 2**32, size=(size, n), dtype=np.uint32)  # keys: ties at an edge are caught below
    edges = np.cumsum(counts)[:-1]  # rank where each further value starts
    thresholds = np.partition(u, edges, axis=1)[:, edges]
    level = np.zeros((size, n), dtype=np.int8)
    tied = np.zeros(size, dtype=bool)
    for j, edge in enumerate(edges):
        above = u >= thresholds[:, j : j + 1]
        tied |= np.count_nonzero(above, axis=1) != n - edge
        if len(edges) == 1:  # two values (0/1 fitness): no level array needed
            out = above.astype(np.float64) if values[0] == 0 and values[1] == 1 else np.where(above, values[1], values[0])
            break
        level += above
    else:
        out = values.take(level)
    if tied.any():
        out[tied] = rng.permuted(np.broadcast_to(W, (int(tied.sum()), n)), axis=1)
    return out


def permutation_p(observed: float, replicates: np.ndarray) -> float:
    """Two-sided permutation p-value (1 + #{|T*| >= |T|}) / (1 + P)."""
    r = replicates[np.isfinite(replicates)]
    if not len(r) or not np.isfinite(observed):
        return float("nan")
    hits = np.count_nonzero(np.abs(r) >= abs(observed) * (1 - 1e-10))
    return (1 + hits) / (1 + len(r))
