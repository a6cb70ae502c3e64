"""How the estimates' cost and memory grow with the number of individuals (prints figures; no pass/fail).

Each size runs in a fresh process (so its peak memory is its own): one season, three sites,
three traits, 0/1 fitness, ``--bootstrap`` resamples and as many permutations. Printed per size:
wall and CPU seconds of ``estimate_table``, peak resident memory of the process, and the growth
of the CPU time per tenfold n (linear cost gives 10x). Targets: growth <= 12x per tenfold n;
1,000,000 individuals with 2,000 resamples in <= 120 s and <= 2 GiB.

    python benchmarks/bench_scaling.py [--sizes 1000 10000 100000 1000000] [--bootstrap 2000]
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys

CHILD = """
import json, resource, sys, time
import numpy as np, pandas as pd
from fieldslope.analysis.design import Design
from fieldslope.analysis.table import estimate_table
n, B = int(sys.argv[1]), int(sys.argv[2])
rng = np.random.default_rng(1)
z = rng.multivariate_normal([50.0, 12.0, 8.0], [[25, 6, 1], [6, 4, 0.5], [1, 0.5, 9]], size=n)
eta = -0.2 + 0.08 * (z[:, 0] - 50) - 0.1 * (z[:, 1] - 12)
alive = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
frame = pd.DataFrame({"id": np.char.add("f", np.arange(n).astype(str)), "season": "s1",
                      "site": np.array(["lower", "middle", "upper"])[np.arange(n) % 3],
                      "length": z[:, 0], "depth": z[:, 1], "spots": z[:, 2], "alive": alive})
design = Design(traits=("length", "depth", "spots"), fitness={"alive": "binary"})
t, c = time.perf_counter(), time.process_time()
estimate_table(frame, design, bootstrap=B)
print(json.dumps({"wall": time.perf_counter() - t, "cpu": time.process_time() - c,
                  "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[1_000, 10_000, 100_000, 1_000_000])
    ap.add_argument("--bootstrap", type=int, default=2000)
    args = ap.parse_args()
    print(f"one season, 3 sites, 3 traits, 0/1 fitness, {args.bootstrap} resamples + permutations; "
          f"load average at start {open('/proc/loadavg').read().split()[0]}")
    print(f"{'individuals':>12} {'wall s':>8} {'CPU s':>8} {'peak MiB':>9} {'CPU growth per 10x n':>22}")
    last = None
    for n in args.sizes:
        out = subprocess.run([sys.executable, "-c", CHILD, str(n), str(args.bootstrap)], capture_output=True,
                             text=True, check=True)
        r = json.loads(out.stdout.strip().splitlines()[-1])
        growth = ""
        if last is not None:
            growth = f"{(r['cpu'] / last[1]) ** (1 / max(1e-9, math.log10(n / last[0]))):.1f} x"
        print(f"{n:>12,} {r['wall']:>8.2f} {r['cpu']:>8.2f} {r['peak_mib']:>9.0f} {growth:>22}", flush=True)
        last = (n, r["cpu"])


if __name__ == "__main__":
    main()
