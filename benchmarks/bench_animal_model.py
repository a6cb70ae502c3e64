"""Speed and memory of the animal model, and interval coverage over simulated studies.

    python benchmarks/bench_animal_model.py [--n 20000] [--studies 200]

Prints, for a simulated pedigree of n individuals over 5 seasons (3 sites):
the time to build the pedigree and A^-1, the univariate fit of one trait,
the bivariate fits of 3 traits and one fitness measure (3 genetic
correlations + 3 Robertson-Price covariances), peak resident memory (each size in a fresh process) at
n/4, n/2 and n, and the coverage of the h^2 profile interval and of the r_g
interval over simulated studies with known values. The peer is the same
REML maximised by a dense likelihood (scipy.optimize), feasible only for
small n; its time is printed beside ours at n = 600. One BLAS thread.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import minimize
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from animal_sim import simulate, tabular_a  # noqa: E402

from fieldslope.analysis.animal_data import model_data, relative_fitness  # noqa: E402
from fieldslope.analysis.animal_model import Kernel, Surface, fit_bivariate, fit_univariate  # noqa: E402
from fieldslope.analysis.design import Design  # noqa: E402
from fieldslope.analysis.pedigree import from_frame  # noqa: E402

G3 = np.array([[0.40, 0.12, 0.10], [0.12, 0.30, 0.05], [0.10, 0.05, 0.35]])
R3 = np.array([[0.60, 0.10, 0.15], [0.10, 0.70, 0.05], [0.15, 0.05, 0.65]])
DESIGN = Design(traits=("t0", "t1", "t2"), fitness={"W": "count"}, id="id", season="season",
                groups=("site",), mother="dam", father="sire")


def study(rng, n, generations=5):
    per = n // generations
    df = simulate(rng, G3, R3, generations=generations, per_generation=per, pairs=max(per // 3, 2),
                  sites=("A", "B", "C"))
    z = (df["t0"] - df["t0"].mean()) / df["t0"].std()
    df["W"] = rng.poisson(np.exp(0.5 + 0.3 * z))
    return df


def timed(fn):
    """(result, wall seconds); the CPU seconds of the call are kept in CPU[0] (this machine is often shared)."""
    t, c = time.perf_counter(), time.process_time()
    out = fn()
    CPU[0] = time.process_time() - c
    return out, time.perf_counter() - t


CPU = [0.0]


def speed(n: int, bivariate_up_to: int) -> None:
    df = study(np.random.default_rng(1), n)
    ped, t_ped = timed(lambda: from_frame(df, "id", "season", "dam", "sire"))
    c_ped = CPU[0]
    md, t_data = timed(lambda: model_data(df, DESIGN, ped, df[["t0"]])[0])
    fit, t_uni = timed(lambda: fit_univariate(Kernel(md)))
    print(f"n = {n}: pedigree + inbreeding {t_ped:.2f} s (CPU {c_ped:.2f} s), model matrices {t_data:.2f} s, "
          f"univariate REML {t_uni:.2f} s (CPU {CPU[0]:.2f} s, {fit.evaluations} factorizations); h2 = {fit.h2:.3f} "
          f"[{fit.h2_low:.3f}, {fit.h2_high:.3f}] (true 0.400)")
    if bivariate_up_to < n:
        return
    t0, c0 = time.perf_counter(), time.process_time()
    traits = list(DESIGN.traits)
    surface = Surface(Kernel(model_data(df, DESIGN, ped, df[traits])[0]))
    rgs = [fit_bivariate(surface, (j, k)).rg for j in range(3) for k in range(j + 1, 3)]
    w = relative_fitness(df, DESIGN, "W").rename("w")
    import pandas as pd
    surface_w = Surface(Kernel(model_data(df, DESIGN, ped, pd.concat([df[traits], w], axis=1))[0]))
    price = [fit_bivariate(surface_w, (j, 3)).cov_a for j in range(3)]
    t_bi, c_bi = time.perf_counter() - t0, time.process_time() - c0
    print(f"  bivariate: 3 genetic correlations + 3 Robertson-Price covariances {t_bi:.1f} s (CPU {c_bi:.1f} s) "
          f"({surface.kernel.calls + surface_w.kernel.calls} factorizations); r_g = "
          f"{', '.join(f'{r:.3f}' for r in rgs)} (true 0.346, 0.267, 0.155); cov_A(z, w) = "
          f"{', '.join(f'{c:.3f}' for c in price)}")


def ordering_peer(n: int) -> None:
    """One factorization of the mixed-model equations as SuperLU does it from scratch (fill-reducing ordering
    each time, as this code did before) beside the one the kernel now repeats (pattern stored in that ordering)."""
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    df = study(np.random.default_rng(1), n)
    kernel = Kernel(model_data(df, DESIGN, from_frame(df, "id", "season", "dam", "sire"), df[["t0"]])[0])
    fresh = sp.csc_matrix((kernel._part_0 + 1.5 * kernel._part_a, kernel._pattern.indices, kernel._pattern.indptr),
                          shape=kernel._pattern.shape)
    opts = dict(diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    lu, _ = timed(lambda: spla.splu(fresh, permc_spec="MMD_AT_PLUS_A", **opts))
    c_fresh = CPU[0]
    kernel.at(0.4)  # the first evaluation finds the ordering and stores the pattern permuted
    ordered = sp.csc_matrix((kernel._part_0 + 1.5 * kernel._part_a, kernel._pattern.indices, kernel._pattern.indptr),
                            shape=kernel._pattern.shape)
    lu2, _ = timed(lambda: spla.splu(ordered, permc_spec="NATURAL", **opts))
    print(f"n = {n}: one factorization, ordering found each time {c_fresh:.2f} s CPU vs ordering kept "
          f"{CPU[0]:.2f} s CPU (fill {lu.L.nnz + lu.U.nnz} and {lu2.L.nnz + lu2.U.nnz} entries)")


MEMORY_CHILD = """
import resource, sys
import pandas as pd
sys.path.insert(0, sys.argv[2])
from bench_animal_model import DESIGN
from fieldslope.analysis.animal_data import model_data
from fieldslope.analysis.animal_model import Kernel, fit_univariate
from fieldslope.analysis.pedigree import from_frame
df = pd.read_pickle(sys.argv[1])
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
fit_univariate(Kernel(model_data(df, DESIGN, from_frame(df, "id", "season", "dam", "sire"), df[["t0"]])[0]))
print(before, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
"""


def memory(n: int) -> None:
    """Peak resident memory of a univariate fit (pedigree, A^-1, mixed-model equations, SuperLU's factors
    included), each size in a fresh process that reads the simulated study from a file (so the simulation's
    own peak is not counted): the growth from one size to the next, beside n's own."""
    import subprocess
    import tempfile

    here = str(Path(__file__).resolve().parent)
    figures, last = [], None
    with tempfile.TemporaryDirectory() as tmp:
        for m in (n // 4, n // 2, n):
            path = str(Path(tmp) / f"study-{m}.pkl")
            study(np.random.default_rng(2), m).to_pickle(path)
            out = subprocess.run([sys.executable, "-c", MEMORY_CHILD, path, here], capture_output=True, text=True,
                                 check=True).stdout.split()
            before, peak = (int(v) / 1024 for v in out)  # KiB -> MiB
            grown = peak - before
            figures.append(f"{m}: {grown:.0f} MiB above the {before:.0f} MiB of the data and imports"
                           + (f" ({grown / last:.2f}x for {m / prev:.0f}x n)" if last else ""))
            last, prev = grown, m
    print("peak resident memory of a univariate fit: " + "; ".join(figures))


def dense_peer(n: int = 600) -> None:
    df = study(np.random.default_rng(3), n, generations=3)
    ped = from_frame(df, "id", "season", "dam", "sire")
    md = model_data(df, DESIGN, ped, df[["t0"]])[0]
    fit, t_ours = timed(lambda: fit_univariate(Kernel(md)))
    A = tabular_a(list(ped.dam), list(ped.sire))
    Z, X, y = md.Z.toarray(), md.X.toarray(), md.Y[:, 0]
    ZAZ = Z @ A @ Z.T

    def dev(lp):
        V = np.exp(lp[0]) * ZAZ + np.exp(lp[1]) * np.eye(len(y))
        Vi = np.linalg.inv(V)
        XtViX = X.T @ Vi @ X
        P = Vi - Vi @ X @ np.linalg.solve(XtViX, X.T @ Vi)
        return np.linalg.slogdet(V)[1] + np.linalg.slogdet(XtViX)[1] + y @ P @ y

    res, t_dense = timed(lambda: minimize(dev, np.log([0.3, 0.6]), method="Nelder-Mead",
                                          options={"xatol": 1e-9, "fatol": 1e-11}))
    va, ve = np.exp(res.x)
    print(f"n = {n}: sparse REML {t_ours:.2f} s (with interval and se) vs dense REML (Nelder-Mead) {t_dense:.2f} s "
          f"(point only); |h2 difference| = {abs(fit.h2 - va / (va + ve)):.1e}, "
          f"|V_A difference| = {abs(fit.va - va):.1e}")


def coverage(studies: int) -> None:
    rng = np.random.default_rng(99)
    hit_h = hit_r = have_r = 0
    for _ in range(studies):
        df = simulate(rng, G3[:2, :2], R3[:2, :2], generations=3, per_generation=150, pairs=50)
        ped = from_frame(df, "id", "season", "dam", "sire")
        md = model_data(df, DESIGN, ped, df[["t0", "t1"]])[0]
        u = fit_univariate(Kernel(model_data(df, DESIGN, ped, df[["t0"]])[0]))
        hit_h += u.h2_low <= 0.4 <= u.h2_high
        b = fit_bivariate(Surface(Kernel(md)), (0, 1))
        if b.rg_low == b.rg_low:
            have_r += 1
            hit_r += b.rg_low <= 0.12 / np.sqrt(0.4 * 0.3) <= b.rg_high
    print(f"coverage over {studies} studies of 450 individuals: h2 profile interval {100 * hit_h / studies:.1f} %; "
          f"r_g Wald (atanh) interval {100 * hit_r / max(have_r, 1):.1f} % of {have_r} with an interval")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=20000)
    ap.add_argument("--studies", type=int, default=200)
    ap.add_argument("--bivariate-up-to", type=int, default=20000, help="skip the bivariate fits above this n")
    args = ap.parse_args()
    with threadpool_limits(limits=1, user_api="blas"):
        dense_peer()
        ordering_peer(args.n)
        for n in sorted({args.n // 4, args.n}):
            speed(n, args.bivariate_up_to)
        memory(args.n)
        coverage(args.studies)


if __name__ == "__main__":
    main()
