"""Speed of the PI's commands on the demo study (three seasons, about 5,400 records).

Targets: ``fieldslope report`` with 2,000 resamples ≤ 20 s; ``summary`` ≤ 1 s; ``changes`` ≤ 1 s
(wall time of the whole command, Python start-up included). Beside each, a peer doing the same
job another way, given its best setting:

- summary: ``fieldslope estimate --season S --site all --fitness total`` (the same numbers);
- changes: two ``fieldslope estimate --bootstrap 0`` runs (the estimates compared);
- the fitness-function band: scipy's ``make_smoothing_spline`` refitted once per resample (the
  reference the tests check against), timed on 100 resamples and scaled to 2,000, against our
  banded solver on the same cell and trait.

Run: ``python benchmarks/bench_report.py`` (builds the demo study in a temporary folder).
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def run(*args: str, env: dict) -> float:
    start = time.perf_counter()
    r = subprocess.run([sys.executable, "-m", "fieldslope.tui.cli", *args], env=env, capture_output=True,
                       text=True)
    took = time.perf_counter() - start
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed: {r.stderr.strip()}")
    return took


def best_of(k: int, *args: str, env: dict) -> float:
    return min(run(*args, env=env) for _ in range(k))


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        study = str(Path(tmp) / "demo")
        env = {**os.environ, "FIELDSLOPE_DEMO_DELAY": "0", "XDG_STATE_HOME": str(Path(tmp) / "state")}
        run("demo", "--headless", "--study", study, env=env)
        print(f"demo study built in {study}; cores: {os.cpu_count()}, load average {os.getloadavg()[0]:.1f}")
        print(f"{'task':<44} {'ours s':>8} {'peer s':>8} {'target':>8}")

        summary = best_of(3, "summary", "--study", study, env=env)
        peer = best_of(3, "estimate", "--study", study, "--season", "2025", "--site", "all", "--fitness", "total",
                       "--format", "csv", env=env)
        print(f"{'summary (2,000 resamples, latest season)':<44} {summary:>8.2f} {peer:>8.2f} {'1.0':>8}")

        changes = best_of(3, "changes", "--since", "12", "--study", study, env=env)
        peer = 2 * best_of(3, "estimate", "--study", study, "--bootstrap", "0", "--format", "csv", env=env)
        print(f"{'changes --since 12':<44} {changes:>8.2f} {peer:>8.2f} {'1.0':>8}")

        out = str(Path(tmp) / "report.html")
        report = run("report", "--study", study, "--output", out, env=env)
        size = os.path.getsize(out) / 1e6
        print(f"{'report (2,000 resamples, every section)':<44} {report:>8.2f} {'':>8} {'20.0':>8}"
              f"   page {size:.1f} MB")

        band_ours, band_peer = band_timing(study)
        print(f"{'fitness-function band, 2,000 resamples':<44} {band_ours:>8.2f} {band_peer:>8.2f} {'':>8}"
              "   (one season pooled, one trait; peer scaled from 100)")


def band_timing(study: str) -> tuple[float, float]:
    import numpy as np
    from scipy.interpolate import make_smoothing_spline
    from threadpoolctl import threadpool_limits

    from fieldslope.analysis import fitness_spline as fs
    from fieldslope.schemas.study import Study
    from fieldslope.tui.report import _cell_data

    with Study.open(study, readonly=True) as st:
        frame = st.store.effective_frame()
        x, W, cells = _cell_data(frame, st.protocol, "2025", "all", "elytron", "total")
    with threadpool_limits(1, "blas"):          # the peer's best setting for many small fits
        start = time.perf_counter()
        ff = fs.fitness_function(x, W, cells, resamples=2000, seed=1, labels=("b",))
        ours = time.perf_counter() - start
        codes = np.unique(cells, return_inverse=True)[1]
        xg = fs._grid(x)
        knots, inv = np.unique(xg, return_inverse=True)
        counts = fs.resample_counts(np.random.default_rng(1), codes, 100)
        times = []
        for r in counts:
            t0 = time.perf_counter()
            mean = np.bincount(codes, weights=r * W) / np.bincount(codes)
            y = W / mean[codes]
            wt = np.bincount(inv, weights=r, minlength=len(knots))
            here = wt > 0
            ybar = np.bincount(inv, weights=r * y, minlength=len(knots))[here] / wt[here]
            make_smoothing_spline(knots[here], ybar, w=wt[here], lam=ff.fit.lam)(ff.grid)
            times.append(time.perf_counter() - t0)
    return ours, statistics.mean(times) * 2000


if __name__ == "__main__":
    main()
