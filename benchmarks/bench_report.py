"""Speed of the PI's commands on the demo study (three seasons, about 5,400 records).

Targets: ``fieldslope report`` with 2,000 resamples ≤ 20 s; ``summary`` ≤ 1 s; ``changes`` ≤ 1 s
(wall time of the whole command, Python start-up included). Beside each, a peer doing the same
job another way, given its best setting:

- summary: ``fieldslope estimate --season S --site all --fitness total --skip-pedigree`` (the same numbers);
- changes: two ``fieldslope estimate --bootstrap 0`` runs (the estimates compared);
- the fitness-function band: scipy's ``make_smoothing_spline`` refitted once per resample (the
  reference the tests check against), timed on 100 resamples and scaled to 2,000, against our
  banded solver on the same cell and trait.

Each is timed cold (the study's ``cache/`` folder removed first: everything computed, CPU seconds
beside wall seconds) and warm (run again on the unchanged record: what an earlier run kept is read
back, ``tui/estimate_cache.py``). The machine may be shared: the load average is printed.

Run: ``python benchmarks/bench_report.py`` (builds the demo study in a temporary folder).
"""

from __future__ import annotations

import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def _cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def run(*args: str, env: dict) -> tuple[float, float]:
    """Wall and CPU seconds of one whole command."""
    start, cpu = time.perf_counter(), _cpu()
    r = subprocess.run([sys.executable, "-m", "fieldslope.tui.cli", *args], env=env, capture_output=True,
                       text=True)
    took = time.perf_counter() - start, _cpu() - cpu
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed: {r.stderr.strip()}")
    return took


def cold(study: str, *args: str, env: dict) -> tuple[float, float]:
    shutil.rmtree(Path(study) / "cache", ignore_errors=True)
    return run(*args, env=env)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        study = str(Path(tmp) / "demo")
        env = {**os.environ, "FIELDSLOPE_DEMO_DELAY": "0", "XDG_STATE_HOME": str(Path(tmp) / "state")}
        env.pop("PYTHONDONTWRITEBYTECODE", None)          # as installed: bytecode compiled once
        run("demo", "--headless", "--study", study, env=env)
        print(f"demo study built in {study}; cores: {os.cpu_count()}, load average {os.getloadavg()[0]:.1f}")
        print(f"{'task':<40} {'cold s':>7} {'CPU s':>6} {'warm s':>7} {'CPU s':>6} {'peer s':>7} {'target':>6}")

        def line(name, args, peer, target):
            c = cold(study, *args, env=env)
            w = min(run(*args, env=env) for _ in range(3))
            print(f"{name:<40} {c[0]:>7.2f} {c[1]:>6.2f} {w[0]:>7.2f} {w[1]:>6.2f} {peer:>7.2f} {target:>6}",
                  flush=True)

        peer = min(cold(study, "estimate", "--study", study, "--season", "2025", "--site", "all", "--fitness", "total",
                        "--skip-pedigree", "--format", "csv", env=env)[0] for _ in range(2))
        line("summary (2,000 resamples, latest season)", ("summary", "--study", study), peer, "1.0")
        peer = 2 * min(cold(study, "estimate", "--study", study, "--bootstrap", "0", "--format", "csv",
                            env=env)[0] for _ in range(2))
        line("changes --since 12", ("changes", "--since", "12", "--study", study), peer, "1.0")
        out = str(Path(tmp) / "report.html")
        line("report (2,000 resamples, every section)", ("report", "--study", study, "--output", out), 0.0, "20.0")
        print(f"report page {os.path.getsize(out) / 1e6:.1f} MB; load average now {os.getloadavg()[0]:.1f}")

        band_ours, band_peer = band_timing(study)
        print(f"fitness-function band, 2,000 resamples: ours {band_ours:.2f} s, peer {band_peer:.2f} s "
              "(one season pooled, one trait; peer scaled from 100)")


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
