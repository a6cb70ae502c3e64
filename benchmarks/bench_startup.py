"""Whole-process times of command-line runs (prints figures; no pass/fail).

Median wall time of ``--runs`` runs of: ``--help``, ``flags``, ``history ID``, ``estimate --bootstrap 0``
on a study (default: a demo study made here), and the modules each command imports that it could do
without (pandas, numpy, scipy), read from ``python -X importtime``. Targets: ``estimate --bootstrap 0``
at 10k individuals <= 0.6 s; ``flags`` and ``history`` <= 0.2 s. The machine may be shared: the load
average is printed.

    python benchmarks/bench_startup.py [--study DIR] [--runs 7]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def whole(argv: list[str], runs: int) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        subprocess.run(argv, capture_output=True, check=False)
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def heavy_imports(argv: list[str]) -> str:
    err = subprocess.run([sys.executable, "-X", "importtime", *argv], capture_output=True, text=True).stderr
    names = {line.rsplit("|", 1)[-1].strip() for line in err.splitlines() if "|" in line}
    return ", ".join(m for m in ("pandas", "numpy", "scipy", "scipy.stats", "scipy.special") if m in names) or "none"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", help="study folder (default: the demo study, made in a temporary folder)")
    ap.add_argument("--individual", default="UR23-0001")
    ap.add_argument("--runs", type=int, default=7)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        study = args.study
        if study is None:
            study = str(Path(tmp) / "demo")
            env = dict(os.environ, FIELDSLOPE_DEMO_DELAY="0")
            subprocess.run([sys.executable, "-m", "fieldslope.tui.cli", "demo", "--headless", "--study", study],
                           capture_output=True, check=True, env=env)
        cli = [sys.executable, "-m", "fieldslope.tui.cli"]
        print(f"load average {open('/proc/loadavg').read().split()[0]}; median of {args.runs} runs")
        print(f"{'command':<34} {'wall s':>7}  imports")
        for name, extra in (("--help", ["--help"]), ("flags", ["flags", "--study", study]),
                            ("history", ["history", args.individual, "--study", study]),
                            ("estimate --bootstrap 0", ["estimate", "--bootstrap", "0", "--study", study])):
            argv = [*cli, *extra]
            print(f"{name:<34} {whole(argv, args.runs):>7.3f}  {heavy_imports(argv[1:])}", flush=True)


if __name__ == "__main__":
    main()
