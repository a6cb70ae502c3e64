"""The pedigree from the parent columns: order, checks, summary, inbreeding and the sparse inverse of A.

Every ID on record, and every ID named as a dam or sire, is one individual;
one with neither parent known is a founder. Individuals are numbered so that
parents come before their offspring. The inverse of the additive relationship
matrix A follows Henderson's (1976, Biometrics 32:69-83) direct rules with the
Mendelian sampling variances of inbred parents; inbreeding coefficients come
from Meuwissen & Luo's (1992, Genet. Sel. Evol. 24:305-313) algorithm.
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.sparse as sp

from fieldslope.analysis.cells import natural_key
from fieldslope.common.errors import PedigreeError

__all__ = ["Pedigree", "PedigreeSummary", "from_frame", "inbreeding", "a_inverse", "summarize"]


@dataclass(frozen=True)
class Pedigree:
    """Every individual and named parent, parents first, with dam and sire indices and the checks' findings."""

    ids: np.ndarray  # object array of IDs, parents before offspring
    dam: np.ndarray  # index of the dam in ``ids``, -1 if unknown
    sire: np.ndarray  # index of the sire, -1 if unknown
    depth: np.ndarray  # generations above the deepest founder line (founders 0)
    inbreeding: np.ndarray  # F of each individual
    problems: tuple[str, ...]  # one sentence per check that failed (the pedigree is still usable)

    @property
    def n(self) -> int:
        return len(self.ids)

    def index(self) -> dict:
        return {v: i for i, v in enumerate(self.ids)}

    def mendelian_variance(self) -> np.ndarray:
        """d_i = var of i's Mendelian sampling term / sigma2_A (1, 3/4 - F_p/4, or 1/2 - (F_s + F_d)/4)."""
        f = np.append(self.inbreeding, -1.0)  # index -1 (unknown parent) reads F = -1
        return 0.5 - 0.25 * (f[self.dam] + f[self.sire])

    def a_inverse(self) -> sp.csc_matrix:
        """A^-1 by Henderson's rules (with inbreeding), sparse."""
        return a_inverse(self.dam, self.sire, self.mendelian_variance())

    def log_det_a(self) -> float:
        """log |A| = sum of log d_i (A = L D L')."""
        return float(np.sum(np.log(self.mendelian_variance())))


@dataclass(frozen=True)
class PedigreeSummary:
    """Counts for the one line that describes a pedigree."""

    individuals: int
    founders: int
    max_depth: int
    full_sib_families: int
    half_sib_families: int
    mean_inbreeding: float
    inbred: int

    def describe(self) -> str:
        return (f"Pedigree: {self.individuals} individuals ({self.founders} founders), {self.max_depth} "
                f"generation{'' if self.max_depth == 1 else 's'} deep; {self.full_sib_families} full-sib, {self.half_sib_families} half-sib families; "
                f"mean inbreeding {self.mean_inbreeding:.4f} ({self.inbred} inbred).")


def _clean(series: pd.Series) -> pd.Series:
    s = series.astype("string").str.strip()
    return s.mask(s.isna() | (s == "") | (s.str.lower() == "nan"))


def _short(names, k: int = 3) -> str:
    names = [str(x) for x in names]
    more = f" and {len(names) - k} more" if len(names) > k else ""
    return ", ".join(names[:k]) + more


def from_frame(frame: pd.DataFrame, id_col: str, season_col: str, dam_col: str | None,
               sire_col: str | None) -> Pedigree:
    """The pedigree of every individual in ``frame`` (all seasons) and every parent it names.

    Raises ``PedigreeError`` when an individual is its own ancestor; the other
    checks (an ID used both as dam and sire, a parent first recorded after its
    offspring, conflicting parents in different records) are sentences in
    ``problems``.

    Parameters: effective data ``frame`` and the names of the ID, season, dam and sire columns. Returns a
    ``Pedigree`` (parents first). Source: none (bookkeeping, no published method).
    """
    ids = _clean(frame[id_col])
    blank = pd.Series(pd.NA, index=frame.index, dtype="string")
    dams = _clean(frame[dam_col]) if dam_col and dam_col in frame else blank
    sires = _clean(frame[sire_col]) if sire_col and sire_col in frame else blank
    seasons = frame[season_col].astype(str)
    rec = pd.DataFrame({"id": ids, "dam": dams, "sire": sires, "season": seasons})[ids.notna()]
    problems: list[str] = []
    parents = rec.groupby("id", sort=False).agg(dam=("dam", "first"), sire=("sire", "first"))
    for col, word in (("dam", "dam"), ("sire", "sire")):
        n_distinct = rec.dropna(subset=[col]).groupby("id")[col].nunique()
        bad = n_distinct[n_distinct > 1].index
        if len(bad):
            problems.append(f"{len(bad)} individual(s) ({_short(bad)}) have different {word}s in different records; "
                            f"the first is used: correct the {word} column in the batch that is wrong.")
    both = sorted(set(parents["dam"].dropna()) & set(parents["sire"].dropna()))
    if both:
        problems.append(f"{len(both)} ID(s) ({_short(both)}) appear both as a dam and as a sire; "
                        "check the parent columns for swapped or mistyped tags.")
    named = pd.Index(pd.concat([parents["dam"], parents["sire"]]).dropna().unique())
    extra = named.difference(parents.index)
    all_ids = np.array(list(parents.index) + list(extra), dtype=object)
    pos = {v: i for i, v in enumerate(all_ids)}
    n = len(all_ids)
    dam = np.full(n, -1, dtype=np.int64)
    sire = np.full(n, -1, dtype=np.int64)
    dam[: len(parents)] = [pos[v] if isinstance(v, str) else -1 for v in parents["dam"].tolist()]
    sire[: len(parents)] = [pos[v] if isinstance(v, str) else -1 for v in parents["sire"].tolist()]
    selfed = np.flatnonzero((dam == np.arange(n)) | (sire == np.arange(n)))
    order, depth = _generations(dam, sire)
    if order is None:
        loop = _find_loop(dam, sire, depth)
        raise PedigreeError(
            f"The parent records form a loop of descent ({' -> '.join(str(all_ids[i]) for i in loop)}): "
            f"{'an individual is named as its own parent' if len(selfed) else 'an individual is its own ancestor'}; "
            "correct the dam or sire of one of these tags.")
    # parent first recorded after its offspring
    rank = {s: k for k, s in enumerate(sorted(rec["season"].unique(), key=natural_key))}
    first = rec.assign(r=rec["season"].map(rank)).groupby("id")["r"].min()
    born = np.full(n, -1)
    born[: len(parents)] = first.reindex(parents.index).to_numpy()
    late = []
    for par in (dam, sire):
        ok = par >= 0
        kid = np.flatnonzero(ok)
        p = par[ok]
        bad = (born[p] >= 0) & (born[kid] >= 0) & (born[p] > born[kid])
        late.extend(zip(all_ids[p[bad]], all_ids[kid[bad]]))
    if late:
        problems.append(f"{len(late)} parent(s) are first recorded in a later season than their offspring "
                        f"({_short([f'{a} of {b}' for a, b in late])}); check those tags in the parent columns.")
    inv = np.empty(n, dtype=np.int64)
    inv[order] = np.arange(n)
    new_dam = np.where(dam[order] >= 0, inv[np.maximum(dam[order], 0)], -1)
    new_sire = np.where(sire[order] >= 0, inv[np.maximum(sire[order], 0)], -1)
    F = inbreeding(new_dam, new_sire)
    return Pedigree(all_ids[order], new_dam, new_sire, depth[order], F, tuple(problems))


def _generations(dam: np.ndarray, sire: np.ndarray) -> tuple[np.ndarray | None, np.ndarray]:
    """(order with parents first, depth), or (None, placed-mask as int) when there is a loop."""
    n = len(dam)
    depth = np.full(n, -1, dtype=np.int64)
    depth[(dam < 0) & (sire < 0)] = 0
    level = 0
    while (depth < 0).any():
        d_ok = (dam < 0) | (depth[np.maximum(dam, 0)] >= 0)
        s_ok = (sire < 0) | (depth[np.maximum(sire, 0)] >= 0)
        ready = (depth < 0) & d_ok & s_ok
        if not ready.any():
            return None, depth
        level += 1
        depth[ready] = level
    return np.argsort(depth, kind="stable"), depth


def _find_loop(dam: np.ndarray, sire: np.ndarray, depth: np.ndarray) -> list[int]:
    """Members of one loop of descent among the individuals that could not be placed."""
    start = int(np.flatnonzero(depth < 0)[0])
    seen: dict[int, int] = {}
    path: list[int] = []
    i = start
    while i not in seen:
        seen[i] = len(path)
        path.append(i)
        i = next(int(p) for p in (dam[i], sire[i]) if p >= 0 and depth[p] < 0)
    loop = path[seen[i]:]
    return loop[::-1] + [loop[-1]]


def inbreeding(dam: np.ndarray, sire: np.ndarray) -> np.ndarray:
    """Inbreeding coefficients (Meuwissen & Luo 1992); parents must precede offspring.

    Parameters: ``dam`` and ``sire`` indices (-1 unknown). Returns F per individual. Source: Meuwissen & Luo
    1992 (Genet. Sel. Evol. 24:305-313).
    """
    n = len(dam)
    F = np.zeros(n + 1)
    F[n] = -1.0  # index -1 = unknown parent
    d = np.ones(n)
    dam_l, sire_l = dam.tolist(), sire.tolist()
    prev = (-2, -2)
    for i in range(n):
        s, m = sire_l[i], dam_l[i]
        d[i] = 0.5 - 0.25 * (F[s] + F[m])
        if s < 0 or m < 0:
            prev = (-2, -2)
            continue  # an unknown parent: not inbred
        if (s, m) == prev:
            F[i] = F[i - 1]
            continue
        prev = (s, m)
        lam: dict[int, float] = {i: 1.0}
        heap = [-i]
        queued = {i}
        f = -1.0
        while heap:
            j = -heapq.heappop(heap)
            lj = lam.pop(j)
            f += lj * lj * d[j]
            for p in (sire_l[j], dam_l[j]):
                if p >= 0:
                    lam[p] = lam.get(p, 0.0) + 0.5 * lj
                    if p not in queued:
                        queued.add(p)
                        heapq.heappush(heap, -p)
        F[i] = f
    return F[:n]


def a_inverse(dam: np.ndarray, sire: np.ndarray, d: np.ndarray) -> sp.csc_matrix:
    """Henderson's rules: b = 1/d_i added to (i,i), -b/2 to (i,p) and (p,i), b/4 to (p,q), p, q known parents.

    Parameters: ``dam``, ``sire`` and the Mendelian sampling variances ``d``. Returns A^-1 (sparse). Source:
    Henderson 1976 (Biometrics 32:69-83); with inbreeding, Quaas 1976 (Biometrics 32:949-953).
    """
    n = len(dam)
    b = 1.0 / d
    idx = np.arange(n)
    rows, cols, vals = [idx], [idx], [b]
    for p in (dam, sire):
        k = p >= 0
        rows += [idx[k], p[k]]
        cols += [p[k], idx[k]]
        vals += [-0.5 * b[k], -0.5 * b[k]]
    for p in (dam, sire):
        for q in (dam, sire):
            k = (p >= 0) & (q >= 0)
            rows.append(p[k])
            cols.append(q[k])
            vals.append(0.25 * b[k])
    return sp.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))


def summarize(ped: Pedigree) -> PedigreeSummary:
    """Counts for the pedigree line: full-sib families are dam-sire pairs with two or more offspring;
    half-sib families are parents with offspring by two or more different mates (an unknown mate counts as one).

    Parameters: a ``Pedigree``. Returns a ``PedigreeSummary``. Source: none (bookkeeping, no published
    method).
    """
    known = (ped.dam >= 0) & (ped.sire >= 0)
    pairs = pd.DataFrame({"dam": ped.dam[known], "sire": ped.sire[known]})
    full = int((pairs.value_counts() >= 2).sum())
    half = 0
    for p, q in ((ped.dam, ped.sire), (ped.sire, ped.dam)):
        k = p >= 0
        mates = pd.DataFrame({"p": p[k], "q": q[k]}).groupby("p")["q"].nunique()
        half += int((mates >= 2).sum())
    return PedigreeSummary(
        individuals=ped.n, founders=int(((ped.dam < 0) & (ped.sire < 0)).sum()),
        max_depth=int(ped.depth.max()) if ped.n else 0, full_sib_families=full, half_sib_families=half,
        mean_inbreeding=float(ped.inbreeding.mean()) if ped.n else 0.0,
        inbred=int((ped.inbreeding > 1e-12).sum()))
