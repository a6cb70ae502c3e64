"""Whole-process times of command-line runs (prints figures; no pass/fail).

Median wall time and median CPU seconds (user + system) of ``--runs`` runs of: ``--help``, ``flags``,
``history ID``, ``batches``, ``estimate --bootstrap 0`` on a study (default: a demo study made here), and
the modules each command imports that it could do without (pandas, numpy, scipy), read from
``python -X importtime``. Targets: ``estimate --bootstrap 0`` at 10k individuals <= 0.6 s; ``flags``,
``history``, ``batches`` and ``--help`` <= 0.2 s. The machine may be shared: the load average is printed,
and CPU seconds are the figure a busy machine disturbs least.

Bytecode is written and used (``PYTHONDONTWRITEBYTECODE`` is cleared for the runs, and one run warms
it), as for an installed package; otherwise every run would compile the sources again.

    python benchmarks/bench_startup.py [--study DIR] [--runs 7] [--python OTHER_VENV/bin/python] [--short]

``--python`` runs the commands with another interpreter (e.g. a venv holding an earlier commit: the
figures side by side with the commit before); ``--short`` leaves ``estimate`` out.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def _children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def whole(argv: list[str], runs: int) -> tuple[float, float]:
    """Median wall and CPU seconds of ``runs`` runs (after one that warms the bytecode and disk cache)."""
    subprocess.run(argv, capture_output=True, check=False, env=ENV)
    walls, cpus = [], []
    for _ in range(runs):
        c, t = _children_cpu(), time.perf_counter()
        subprocess.run(argv, capture_output=True, check=False, env=ENV)
        walls.append(time.perf_counter() - t)
        cpus.append(_children_cpu() - c)
    return statistics.median(walls), statistics.median(cpus)


def heavy_imports(argv: list[str]) -> str:
    err = subprocess.run([argv[0], "-X", "importtime", *argv[1:]], capture_output=True, text=True, env=ENV).stderr
    names = {line.rsplit("|", 1)[-1].strip() for line in err.splitlines() if "|" in line}
    return ", ".join(m for m in ("pandas", "numpy", "scipy", "scipy.stats", "scipy.special") if m in names) or "none"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", help="study folder (default: the demo study, made in a temporary folder)")
    ap.add_argument("--individual", default="UR23-0001")
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--python", default=sys.executable, help="interpreter that runs the commands")
    ap.add_argument("--short", action="store_true", help="leave estimate --bootstrap 0 out")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        study = args.study
        if study is None:
            study = str(Path(tmp) / "demo")
            env = dict(os.environ, FIELDSLOPE_DEMO_DELAY="0")
            subprocess.run([args.python, "-m", "fieldslope.tui.cli", "demo", "--headless", "--study", study],
                           capture_output=True, check=True, env=env)
        cli = [args.python, "-m", "fieldslope.tui.cli"]
        print(f"load average {open('/proc/loadavg').read().split()[0]}; median of {args.runs} runs; "
              f"python -c pass: {whole([args.python, '-c', 'pass'], args.runs)[1]:.3f} CPU s; {args.python}")
        print(f"{'command':<28} {'wall s':>7} {'CPU s':>7}  imports")
        for name, extra in (("--help", ["--help"]), ("flags", ["flags", "--study", study]),
                            ("history", ["history", args.individual, "--study", study]),
                            ("batches", ["batches", "--study", study]),
                            ("estimate --bootstrap 0", ["estimate", "--bootstrap", "0", "--study", study])):
            if args.short and name.startswith("estimate"):
                continue
            argv = [*cli, *extra]
            wall, cpu = whole(argv, args.runs)
            print(f"{name:<28} {wall:>7.3f} {cpu:>7.3f}  {heavy_imports(argv)}", flush=True)


if __name__ == "__main__":
    main()
