"""Speed of the estimation engine (prints figures; no pass/fail).

Study: 10,000 individuals in 2 cells, 3 traits, 0/1 fitness, 2,000 resamples.
Figures: our full estimates table (bootstrap + permutations); the peer, a
careful statsmodels loop refitting the linear and quadratic models per
resample with one BLAS thread, its best setting (fewer resamples, scaled); the
ratio; the floor, all work no exact method avoids (drawing the resample counts,
the moment product, the solves, one logistic pass); bootstrap=0 (live
dashboard path); and the coverage of 95 % bootstrap intervals over 1,000
simulated seasons with a known gradient. Whole-process start-up and the
1k-1M scaling are in bench_startup.py and bench_scaling.py.

With ``--peer COMMIT`` (for example 1e5e437, before the partial permutation
tests) the full table is also timed at that commit, in a subprocess importing
its sources from a temporary export (``git archive``), and the two are printed
side by side (best wall clock and CPU time of three runs each, alternating).

Run: python benchmarks/bench_estimation.py [--quick] [--peer COMMIT]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fieldslope.analysis.cells import prepare, split_cells  # noqa: E402
from fieldslope.analysis.design import Design  # noqa: E402
from fieldslope.analysis.logistic import weighted_pass  # noqa: E402
from fieldslope.analysis.resample import CHUNK, SeasonResampler, draw_counts  # noqa: E402
from fieldslope.analysis.table import BLAS_THREADS, estimate_table  # noqa: E402
from fieldslope.common.names import ALL, Q  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

TRAITS = ("length", "depth", "spots")


def study(n: int = 10_000, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z = rng.multivariate_normal([50.0, 12.0, 8.0], [[25, 6, 1], [6, 4, 0.5], [1, 0.5, 9]], size=n)
    eta = -0.2 + 0.08 * (z[:, 0] - 50) - 0.1 * (z[:, 1] - 12)
    alive = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    return pd.DataFrame({"id": [f"f{i}" for i in range(n)], "season": "s1", "site": np.where(np.arange(n) % 2, "upper", "lower"),
                         "length": z[:, 0], "depth": z[:, 1], "spots": z[:, 2], "alive": alive})


DESIGN = Design(traits=TRAITS, fitness={"alive": "binary"})


def timed(fn, repeat: int = 1) -> float:
    """Best wall-clock time of ``repeat`` runs; the CPU time of that run is kept in CPU[fn's label]."""
    best, cpu = np.inf, np.inf
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        fn()
        wall = time.perf_counter() - t
        if wall < best:
            best, cpu = wall, time.process_time() - c
    LAST_CPU[0] = cpu
    return best


LAST_CPU = [0.0]  # CPU time of the best run of the last ``timed`` call (the machine may be shared)


def statsmodels_loop(frame: pd.DataFrame, B: int, seed: int = 3) -> None:
    """Resample within cells, re-standardize, refit linear and quadratic models (cells and pooled) with statsmodels."""
    import statsmodels.api as sm

    rng = np.random.default_rng(seed)
    cells = [g.reset_index(drop=True) for _, g in frame.groupby("site")]
    for _ in range(B):
        xs, ws = [], []
        for g in cells:
            d = g.iloc[rng.integers(0, len(g), len(g))]
            z = d[list(TRAITS)].to_numpy()
            xs.append((z - z.mean(0)) / z.std(0, ddof=1))
            ws.append(d["alive"].to_numpy() / d["alive"].mean())
        for x, w in [*zip(xs, ws), (np.vstack(xs), np.concatenate(ws))]:
            sm.OLS(w, sm.add_constant(x)).fit()
            q = np.column_stack([x] + [x[:, j] * x[:, k] * (0.5 if j == k else 1) for j in range(3) for k in range(j, 3)])
            sm.OLS(w, sm.add_constant(q)).fit()


def floor(frame: pd.DataFrame, B: int) -> float:
    """The least work any exact resampling method must do: draw the resample counts, one matrix product
    of the counts by the cells' distinct moment features, the batched solves of the linear and
    quadratic models, and one pass of a logistic fit over every resample and individual."""
    cells = split_cells(frame, DESIGN, ["alive"])["s1"]
    preps = {"alive": [prepare(c, "alive", "binary", TRAITS) for c in cells]}
    rs = SeasonResampler(preps, TRAITS, pooled=True, logistic_blocks=set())
    features = [fm.matrix() for fm in rs.features]  # held whole here: the floor leaves out making its slabs
    designs = []
    for c in cells:
        X = np.column_stack([np.ones(len(c.z)), (c.z - c.z.mean(0)) / c.z.std(0)])
        a, b = np.triu_indices(X.shape[1])
        designs.append((X, np.ascontiguousarray(X.T), X[:, a] * X[:, b]))
    d = 1 + len(TRAITS) + len(TRAITS) * (len(TRAITS) + 1) // 2

    def work():
        for i, start in enumerate(range(0, B, CHUNK)):
            size = min(CHUNK, B - start)
            rng = np.random.default_rng(i)
            counts = [draw_counts(rng, len(c.z), size) for c in cells]
            for C, F in zip(counts, features):
                C @ F
            for _ in range(3):  # linear and quadratic models of each cell and the pooled block
                np.linalg.solve(np.broadcast_to(np.eye(d), (size, d, d)), np.ones((size, d, 1)))
            for C, (X, XT, feats) in zip(counts, designs):
                weighted_pass(X, XT, feats, C, np.arange(size), np.zeros((size, X.shape[1])))

    with threadpool_limits(limits=BLAS_THREADS, user_api="blas"):  # as the estimates run
        return timed(work, repeat=3)


def coverage(seasons: int, B: int, n: int = 150, beta: float = 0.3, seed: int = 7) -> float:
    """Share of 95 % bootstrap intervals covering the true gradient (w = 1 + beta x + e, one trait, population slope beta)."""
    rng = np.random.default_rng(seed)
    design = Design(traits=("z",), fitness={"w": "continuous"}, groups=())
    hits = 0
    for s in range(seasons):
        x = rng.uniform(-np.sqrt(3), np.sqrt(3), n)  # sd 1; bounded noise keeps fitness positive
        w = 1 + beta * x + rng.uniform(-0.4, 0.4, n)
        frame = pd.DataFrame({"id": np.arange(n).astype(str), "season": "s", "z": x, "w": w})
        t = estimate_table(frame, design, bootstrap=B, permutations=0, seed=s).table
        r = t[(t.quantity == Q.GRADIENT) & (t.site == ALL)].iloc[0]
        hits += r.ci_low <= beta <= r.ci_high
    return hits / seasons


PEER_SCRIPT = """
import sys, time
sys.path.insert(0, {bench!r})
import bench_estimation as be
from fieldslope.analysis.table import estimate_table
frame = be.study()
c, t = time.process_time(), time.perf_counter()
estimate_table(frame, be.DESIGN, bootstrap=2000)
print(time.perf_counter() - t, time.process_time() - c)
"""


def peer_side_by_side(commit: str, runs: int = 3) -> None:
    """Full table (2,000 resamples and permutations) here and at ``commit``, alternating runs."""
    import subprocess
    import tempfile

    root = Path(__file__).resolve().parents[1]
    with tempfile.TemporaryDirectory() as tmp:
        src, path = Path(tmp) / "src", Path(tmp) / "path" / "fieldslope"
        src.mkdir()
        path.mkdir(parents=True)
        archive = subprocess.run(["git", "-C", str(root), "archive", commit], check=True, capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", str(src)], input=archive, check=True)
        for layer in ("analysis", "common", "schemas", "tui", "demo_season"):
            (path / layer).symlink_to(src / layer)
        best = {"here": (np.inf, np.inf), commit: (np.inf, np.inf)}
        code = PEER_SCRIPT.format(bench=str(Path(__file__).parent))
        for _ in range(runs):
            for name, env_path in (("here", None), (commit, str(path.parent))):
                env = dict(__import__("os").environ)
                if env_path:
                    env["PYTHONPATH"] = env_path
                out = subprocess.run([sys.executable, "-c", code], env=env, check=True, capture_output=True, text=True)
                wall, cpu = map(float, out.stdout.split())
                best[name] = min(best[name], (wall, cpu))
    (w1, c1), (w0, c0) = best["here"], best[commit]
    print(f"full table here: {w1:.3f} s [CPU {c1:.3f}]; at {commit}: {w0:.3f} s [CPU {c0:.3f}]; "
          f"ratio {w1 / w0:.2f} x wall, {c1 / c0:.2f} x CPU   (target <= 1.5 x)")


def main() -> None:
    quick = "--quick" in sys.argv
    if "--peer" in sys.argv:
        peer_side_by_side(sys.argv[sys.argv.index("--peer") + 1])
    frame = study()
    B = 2000
    cpu = {}

    def run(name, fn, repeat=2):
        wall = timed(fn, repeat)
        cpu[name] = LAST_CPU[0]
        return wall

    t_full = run("full", lambda: estimate_table(frame, DESIGN, bootstrap=B))
    t_boot_only = run("boot", lambda: estimate_table(frame, DESIGN, bootstrap=B, permutations=0))
    continuous = Design(traits=TRAITS, fitness={"alive": "continuous"})  # same data, no logistic fits
    t_nolog = run("nolog", lambda: estimate_table(frame, continuous, bootstrap=B))
    t_zero = run("zero", lambda: estimate_table(frame, DESIGN, bootstrap=0), repeat=3)
    t_perm = run("perm", lambda: estimate_table(frame, DESIGN, bootstrap=0, permutations=B))
    t_linquad = run("linquad", lambda: estimate_table(frame, continuous, bootstrap=B, permutations=0))
    loop_B = 20 if quick else 50
    with threadpool_limits(limits=BLAS_THREADS, user_api="blas"):  # same BLAS threads as ours
        t_loop = run("loop", lambda: statsmodels_loop(frame, loop_B), repeat=1) * B / loop_B
    t_floor = floor(frame, B)
    print(f"study: {len(frame)} individuals, 2 cells, {len(TRAITS)} traits, 0/1 fitness, {B} resamples")
    print("times: best wall clock of 2 runs [CPU time of that run]; the machine may be shared")
    print(f"full estimates table (bootstrap + {B} permutations): {t_full:8.3f} s [{cpu['full']:.3f}]")
    print(f"  of which bootstrap only (permutations=0):          {t_boot_only:8.3f} s [{cpu['boot']:.3f}]")
    print(f"  same table without logistic fits (fitness declared continuous): {t_nolog:8.3f} s [{cpu['nolog']:.3f}]")
    print(f"  permutations only (bootstrap=0, permutations={B}): {t_perm:8.3f} s [{cpu['perm']:.3f}]")
    print(f"bootstrap=0 (live dashboard path):                   {t_zero:8.3f} s [{cpu['zero']:.3f}]")
    print(f"statsmodels loop, linear+quadratic only, scaled from {loop_B}: {t_loop:8.1f} s")
    print(f"speed-up over the loop (full table vs loop):        {t_loop / t_full:8.0f} x")
    print(f"floor: draw counts, counts @ features, solves, one logistic pass: {t_floor:6.3f} s")
    print(f"full table / floor:                                 {t_full / t_floor:8.1f} x")
    print(f"bootstrap only / floor:                             {t_boot_only / t_floor:8.1f} x")
    print(f"table without logistic / floor:                     {t_nolog / t_floor:8.1f} x")
    print(f"speed-up over the loop, table without logistic:     {t_loop / t_nolog:8.0f} x")
    print(f"like for like (bootstrap of linear+quadratic, no logistic, no permutations): {t_linquad:6.3f} s,"
          f" {t_loop / t_linquad:.0f} x faster than the loop, {t_linquad / t_floor:.1f} x the floor")
    k = 100 if quick else 1000
    print(f"coverage of 95 % intervals over {k} seasons (B=400): {coverage(k, 400):.3f}")


if __name__ == "__main__":
    main()
