"""Whole-process ratio: ``fieldslope estimate --fitness survived`` against a resampling loop script
(prints figures; no pass/fail).

Study: 10,000 individuals in 2 cells (``bench_estimation.study``), 3 traits, 0/1 survival, taken in
as a batch file. Ours: ``fieldslope estimate --fitness survived --bootstrap 2000 --skip-pedigree
--format csv`` as a fresh process, with its ``cache/`` folder removed before each run (every run
computes; read-back runs are not timed). The peer: a Python script (run as a fresh process) that
reads the same batch file with pandas and refits the linear and quadratic models of each cell and
the pooled block with statsmodels OLS for every resample (``bench_estimation.statsmodels_loop``),
with one BLAS thread (``OPENBLAS_NUM_THREADS=1`` etc., its best setting for many small fits). Ours
does more (permutation p-values, logistic gradients, differentials). Both get one BLAS thread.
Target: ratio >= 12x. The machine may be shared: load average and CPU seconds are printed.

    python benchmarks/bench_peer_ratio.py [--individuals 10000] [--bootstrap 2000] [--peer-resamples 2000]

``--peer-resamples R`` < bootstrap runs the peer on R resamples and scales its loop time (start-up
and reading are counted once), printed as such.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ONE_THREAD = {k: "1" for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")}

def protocol_text(parents: bool = False) -> str:
    """A protocol for invented studies: three traits, 0/1 survival, dams and sires when ``parents``."""
    text = ('[study]\nname = "benchmark"\nid = "tag"\nseason = "season"\ngroups = ["site"]\n'
            + "".join(f"[traits.{t}]\nmin = -50\nmax = 200\n" for t in ("length", "depth", "spots"))
            + '[fitness.survived]\nkind = "binary"\n')
    return text + ('[parents]\nmother = "dam"\nfather = "sire"\n' if parents else "")


PEER = """
import sys, time
sys.path.insert(0, {here!r})
t0 = time.perf_counter()
import pandas as pd
import bench_estimation as be
frame = pd.read_csv({csv!r}).rename(columns={{"survived": "alive", "tag": "id"}})
t1 = time.perf_counter()
be.statsmodels_loop(frame, {resamples})
print(t1 - t0, time.perf_counter() - t1)
"""


def children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def run(argv, env=None) -> tuple[float, float, str]:
    c, t = children_cpu(), time.perf_counter()
    out = subprocess.run(argv, capture_output=True, text=True, env=env, check=True).stdout
    return time.perf_counter() - t, children_cpu() - c, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--individuals", type=int, default=10_000)
    ap.add_argument("--bootstrap", type=int, default=2000)
    ap.add_argument("--peer-resamples", type=int, default=None)
    ap.add_argument("--runs", type=int, default=2)
    args = ap.parse_args()
    peer_b = args.peer_resamples or args.bootstrap
    sys.path.insert(0, str(HERE))
    import bench_estimation as be

    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"} | ONE_THREAD
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        frame = be.study(args.individuals).rename(columns={"alive": "survived", "id": "tag"})
        frame["survived"] = frame["survived"].astype(int)
        frame["season"] = "2024"                                   # a season is a year
        csv = tmp / "peer_batch.csv"
        frame.to_csv(csv, index=False)
        (tmp / "protocol.toml").write_text(protocol_text())
        study = tmp / "study"
        cli = [sys.executable, "-m", "fieldslope.tui.cli"]
        subprocess.run([*cli, "init", str(study), "--protocol", str(tmp / "protocol.toml")], check=True,
                       capture_output=True, env=env)
        r = subprocess.run([*cli, "import", str(csv), "--study", str(study)], capture_output=True, text=True, env=env)
        if r.returncode:
            sys.exit(f"the batch was not taken in: {r.stderr or r.stdout}")
        ours = []
        for _ in range(args.runs):
            shutil.rmtree(study / "cache", ignore_errors=True)      # time the computation, not a read-back
            wall, cpu, _ = run([*cli, "estimate", "--fitness", "survived", "--bootstrap", str(args.bootstrap),
                                "--skip-pedigree", "--format", "csv", "--study", str(study)], env)
            ours.append((wall, cpu))
        wall_o, cpu_o = min(ours)
        wall_p, cpu_p, out = run([sys.executable, "-c", PEER.format(here=str(HERE), csv=str(csv), resamples=peer_b)],
                                 env)
        start, loop = map(float, out.split())
        scale = args.bootstrap / peer_b
        peer_wall = wall_p + loop * (scale - 1)
        peer_cpu = cpu_p * (start + loop * scale) / (start + loop)
    print(f"load average {open('/proc/loadavg').read().split()[0]} (machine shared); {args.individuals:,} individuals, "
          f"{args.bootstrap} resamples, one BLAS thread each")
    print(f"ours  (estimate --fitness survived, whole process, best of {args.runs}): {wall_o:8.2f} s wall "
          f"{cpu_o:8.2f} s CPU")
    how = "" if scale == 1 else f" (ran {peer_b} resamples: loop time x {scale:g}, start-up once)"
    print(f"peer  (statsmodels loop script, whole process){how}: {peer_wall:8.2f} s wall {peer_cpu:8.2f} s CPU")
    print(f"ratio {peer_wall / wall_o:.1f}x wall, {peer_cpu / cpu_o:.1f}x CPU   (target >= 12x)")


if __name__ == "__main__":
    main()
