"""Whole-process times of command-line runs (prints figures; no pass/fail).

Median wall time and median CPU seconds (user + system) of ``--runs`` runs of: ``--help``, ``flags``,
``history ID``, ``batches``, ``estimate --bootstrap 0`` on a study (default: a demo study made here), and
the modules each command imports that it could do without (pandas, numpy, scipy), read from
``python -X importtime``. Targets: ``estimate --bootstrap 0`` at 10k individuals <= 0.6 s; ``flags``,
``history``, ``batches`` and ``--help`` <= 0.2 s. The machine may be shared: the load average is printed,
and CPU seconds are the figure a busy machine disturbs least. ``estimate`` runs compute (the study's
``cache/`` is removed before each; a read-back is faster still).

Bytecode is written and used (``PYTHONDONTWRITEBYTECODE`` is cleared for the runs, and one run warms
it), as for an installed package; otherwise every run would compile the sources again.

    python benchmarks/bench_startup.py [--study DIR | --individuals N] [--runs 7] [--python OTHER_VENV/bin/python]
                                       [--short]

``--individuals N`` makes a study of N invented individuals instead of the demo (two seasons, three
sites, the second season's dams and sires from the first: a pedigree the animal model fits), and adds
``estimate --bootstrap 0 --pedigree`` (the quick look with the animal models asked for).
``--python`` runs the commands with another interpreter (e.g. a venv holding an earlier commit: the
figures side by side with the commit before); ``--short`` leaves ``estimate`` out.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
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


def whole(argv: list[str], runs: int, cache: Path | None = None) -> tuple[float, float]:
    """Median wall and CPU seconds of ``runs`` runs (after one that warms the bytecode and disk cache);
    ``cache`` (a study's kept results) is removed before each run, so every run computes."""
    subprocess.run(argv, capture_output=True, check=False, env=ENV)
    walls, cpus = [], []
    for _ in range(runs):
        if cache is not None:
            shutil.rmtree(cache, ignore_errors=True)
        c, t = _children_cpu(), time.perf_counter()
        subprocess.run(argv, capture_output=True, check=False, env=ENV)
        walls.append(time.perf_counter() - t)
        cpus.append(_children_cpu() - c)
    return statistics.median(walls), statistics.median(cpus)


def make_study(folder: Path, n: int, python: str) -> str:
    """A study of ``n`` invented individuals: half in 2023, half in 2024 with parents from 2023."""
    import numpy as np

    rng = np.random.default_rng(5)
    half = n // 2
    lines = ["tag,season,site,length,depth,spots,survived,dam,sire"]
    for i in range(n):
        season, site = ("2023", i) if i < half else ("2024", i)
        dam = sire = ""
        if i >= half:
            dam, sire = f"T{2 * rng.integers(0, half // 2):06d}", f"T{2 * rng.integers(0, half // 2) + 1:06d}"
        length, depth, spots = rng.normal(50, 5), rng.normal(12, 2), rng.normal(8, 3)
        alive = int(rng.random() < 1 / (1 + np.exp(-(0.08 * (length - 50)))))
        lines.append(f"T{i:06d},{season},{('lower', 'middle', 'upper')[site % 3]},{length:.2f},{depth:.2f},{spots:.2f},{alive},"
                     f"{dam},{sire}")
    (folder / "batch.csv").write_text("\n".join(lines) + "\n")
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from bench_peer_ratio import protocol_text

    (folder / "protocol.toml").write_text(protocol_text(parents=True))
    study = str(folder / "study")
    for argv in (["init", study, "--protocol", str(folder / "protocol.toml")],
                 ["import", str(folder / "batch.csv"), "--study", study]):
        subprocess.run([python, "-m", "fieldslope.tui.cli", *argv], capture_output=True, check=True, env=ENV)
    return study


def heavy_imports(argv: list[str]) -> str:
    err = subprocess.run([argv[0], "-X", "importtime", *argv[1:]], capture_output=True, text=True, env=ENV).stderr
    names = {line.rsplit("|", 1)[-1].strip() for line in err.splitlines() if "|" in line}
    return ", ".join(m for m in ("pandas", "numpy", "scipy", "scipy.stats", "scipy.special") if m in names) or "none"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--study", help="study folder (default: the demo study, made in a temporary folder)")
    ap.add_argument("--individual", default=None, help="ID for history (default: one of the study's)")
    ap.add_argument("--individuals", type=int, default=None, help="make a study of N invented individuals")
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--python", default=sys.executable, help="interpreter that runs the commands")
    ap.add_argument("--short", action="store_true", help="leave estimate --bootstrap 0 out")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        study = args.study
        individual = args.individual or ("T000001" if args.individuals else "UR23-0001")
        if args.individuals:
            study = make_study(Path(tmp), args.individuals, args.python)
        elif study is None:
            study = str(Path(tmp) / "demo")
            env = dict(os.environ, FIELDSLOPE_DEMO_DELAY="0")
            subprocess.run([args.python, "-m", "fieldslope.tui.cli", "demo", "--headless", "--study", study],
                           capture_output=True, check=True, env=env)
        cli = [args.python, "-m", "fieldslope.tui.cli"]
        print(f"load average {open('/proc/loadavg').read().split()[0]}; median of {args.runs} runs; "
              f"python -c pass: {whole([args.python, '-c', 'pass'], args.runs)[1]:.3f} CPU s; {args.python}")
        print(f"{'command':<28} {'wall s':>7} {'CPU s':>7}  imports")
        for name, extra in (("--help", ["--help"]), ("flags", ["flags", "--study", study]),
                            ("history", ["history", individual, "--study", study]),
                            ("batches", ["batches", "--study", study]),
                            ("estimate --bootstrap 0", ["estimate", "--bootstrap", "0", "--study", study]),
                            ("estimate --bootstrap 0 --pedigree",
                             ["estimate", "--bootstrap", "0", "--pedigree", "--study", study])):
            if args.short and name.startswith("estimate") or name.endswith("--pedigree") and not args.individuals:
                continue
            argv = [*cli, *extra]
            wall, cpu = whole(argv, args.runs, Path(study) / "cache" if name.startswith("estimate") else None)
            print(f"{name:<28} {wall:>7.3f} {cpu:>7.3f}  {heavy_imports(argv)}", flush=True)


if __name__ == "__main__":
    main()
