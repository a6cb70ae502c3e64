"""Level and power of the permutation tests by simulation (prints rates; no pass/fail).

The same checks as tests/test_analysis_inference.py with more seasons and
permutations: the partial test of beta_b (Freedman & Lane 1983) under beta_b = 0
with b correlated 0.5 with a strongly selected trait (target 3-7 %), its power at
beta_b = 0.15 beside the test that shuffles fitness, and the canonical
eigenvalue tests under no nonlinear selection (target at most 7 %).

Run: python benchmarks/bench_inference.py [--quick]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from test_analysis_inference import p_values, seasons, shuffled_fitness_p  # noqa: E402

from fieldslope.common.names import Q  # noqa: E402


def main() -> None:
    quick = "--quick" in sys.argv
    k, P = (500, 199) if quick else (2000, 999)
    rng = np.random.default_rng(11)
    t = time.perf_counter()
    null = p_values(seasons(rng, k, 300, beta_a=0.6, beta_b=0.0), P)
    print(f"partial null (beta_b = 0, r = 0.5, beta_a = 0.6, n = 300), {k} seasons, {P} permutations: "
          f"rejection at 5 % {(null[(Q.GRADIENT, 'b')] < 0.05).mean():.3f}   (target 0.03-0.07)")
    frame = seasons(rng, k // 4, 300, beta_a=0.6, beta_b=0.15)
    partial = (p_values(frame, P)[("gradient", "b")] < 0.05).mean()
    plain = np.mean([shuffled_fitness_p(g, P, rng) < 0.05 for _, g in frame.groupby("rep")])
    print(f"power at beta_b = 0.15, {k // 4} seasons: partial test {partial:.3f}, fitness shuffled {plain:.3f}")
    null = p_values(seasons(rng, k, 200, beta_a=0.6, beta_b=0.3), P)
    print(f"no nonlinear selection (gamma = 0, beta = 0.6, 0.3, n = 200), {k} seasons: largest eigenvalue "
          f"significant {(null[(Q.CANONICAL, 'm1')] < 0.05).mean():.3f}, smallest {(null[(Q.CANONICAL, 'm2')] < 0.05).mean():.3f}"
          "   (target <= 0.07)")
    print(f"time {time.perf_counter() - t:.1f} s")


if __name__ == "__main__":
    main()
