"""Dashboard speed: first paint, and how fast a batch from another process reaches the screen.

Prints:
- first paint: seconds from a fresh interpreter starting the app module to the
  first frame of the start screen (target 1.5 s);
- for a study of 10,000 individuals (invented, generated here): seconds from
  the poller seeing another process's batch to new point estimates on screen
  (target 1 s), the commit-to-poll delay, and the time to bootstrap intervals: to the first
  stage's (200 resamples, from 1000 on) and to all of them.

Run from the repository root: ``python benchmarks/bench_dashboard.py``
(``--individuals N``, ``--bootstrap N``, ``--rounds N``).
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

PROTOCOL = """\
[study]
name = "Bench moths"
id = "tag"
season = "season"
groups = ["site"]

[traits.wing]
unit = "mm"
min = 10
max = 30
[traits.antenna]
unit = "mm"
min = 3
max = 12
[traits.mass]
unit = "mg"
min = 20
max = 200

[fitness.survived]
kind = "binary"
[fitness.eggs]
kind = "count"
[fitness.total]
product = ["survived", "eggs"]
"""

FIRST_PAINT_CHILD = """
import sys, time
t0 = time.perf_counter()
sys.path.insert(0, {root!r})
from fieldslope.tui.app import FieldslopeApp

class Timed(FieldslopeApp):
    def on_mount(self):  # Textual runs the base class's on_mount too
        self.call_after_refresh(self.painted)

    def painted(self):
        print(f"{{time.perf_counter() - t0:.3f}}")
        self.exit()

Timed(None).run(headless=True)
"""

IMPORT_CHILD = """
import sys, time
sys.path.insert(0, {root!r})
from fieldslope.schemas.study import Study
with Study.open({study!r}) as s:
    r = s.store.import_file({path!r}, operator="other-process")
print(time.time(), r.outcome)
"""


def write_sheet(path: Path, season: str, site: str, start: int, n: int, seed: int) -> None:
    import numpy as np

    rng = np.random.default_rng(seed)
    wing = np.clip(rng.normal(20, 2, n), 11, 29)
    antenna = np.clip(rng.normal(7, 1, n) + 0.2 * (wing - 20), 3.5, 11.5)
    mass = np.clip(rng.normal(100, 15, n) + 3 * (wing - 20), 25, 190)
    alive = (rng.random(n) < 1 / (1 + np.exp(-(0.2 + 0.3 * (wing - 20))))).astype(int)
    eggs = np.where(alive == 1, rng.poisson(np.clip(20 + 0.1 * (mass - 100), 1, None)), 0)
    lines = ["tag,season,site,wing,antenna,mass,survived,eggs"]
    for i in range(n):
        lines.append(f"M{start + i:06d},{season},{site},{wing[i]:.2f},{antenna[i]:.2f},{mass[i]:.1f},"
                     f"{alive[i]},{eggs[i]}")
    path.write_text("\n".join(lines) + "\n")


def first_paint(rounds: int) -> list[float]:
    out = []
    for _ in range(rounds):
        res = subprocess.run([sys.executable, "-c", FIRST_PAINT_CHILD.format(root=str(ROOT))],
                             capture_output=True, text=True, timeout=60)
        out.append(float(res.stdout.strip().splitlines()[-1]))
    return out


def build_study(folder: Path, individuals: int) -> Path:
    from fieldslope.schemas.study import Study

    proto = folder / "protocol.toml"
    proto.write_text(PROTOCOL)
    root = folder / "study"
    with Study.create(root, proto) as study:
        sites = ("North", "South", "East", "West")
        per = individuals // len(sites)
        for k, site in enumerate(sites):
            sheet = folder / f"{site}.csv"
            write_sheet(sheet, "2025", site, k * per, per, seed=k)
            study.store.import_file(sheet, operator="bench")
    return root


async def live_update(root: Path, folder: Path, bootstrap: int, rounds: int) -> dict[str, list[float]]:
    from fieldslope.tui.app import FieldslopeApp

    app = FieldslopeApp(root, bootstrap=bootstrap, poll_interval=0.5)
    figures: dict[str, list[float]] = {"points": [], "commit_to_poll": [], "intervals": [], "first_points": [],
                                       "first_stage": []}
    async with app.run_test(size=(80, 24)) as pilot:
        t0 = time.perf_counter()
        while app.snapshot is None:
            await pilot.pause(0.01)
        figures["first_points"].append(time.perf_counter() - t0)
        for r in range(rounds):
            while app.updating or app.progress:   # let the intervals of the last round finish
                await pilot.pause(0.05)
            gen = app.snapshot.generation
            sheet = folder / f"late-{r}.csv"
            write_sheet(sheet, "2025", "North", 900000 + r * 100, 100, seed=100 + r)
            res = subprocess.run([sys.executable, "-c", IMPORT_CHILD.format(root=str(ROOT), study=str(root),
                                                                            path=str(sheet))],
                                 capture_output=True, text=True, timeout=120)
            committed_wall = float(res.stdout.split()[0])
            committed = time.perf_counter() - (time.time() - committed_wall)
            while app.snapshot.generation == gen:
                await pilot.pause(0.005)
            shown = app.timings["points_shown"]
            figures["points"].append(shown - app.timings["poll_saw_change"])
            figures["commit_to_poll"].append(app.timings["poll_saw_change"] - committed)
            t_int = time.perf_counter()
            if bootstrap:
                while not app.snapshot.intervals:
                    await pilot.pause(0.02)
                figures["first_stage"].append(time.perf_counter() - t_int)
                while app.snapshot.resamples < bootstrap:
                    await pilot.pause(0.05)
                figures["intervals"].append(time.perf_counter() - t_int)
    return figures


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--individuals", type=int, default=10_000)
    parser.add_argument("--bootstrap", type=int, default=2000)
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()

    paints = first_paint(args.rounds)
    print(f"first paint (fresh interpreter to start screen): median {statistics.median(paints):.2f} s "
          f"(runs: {', '.join(f'{p:.2f}' for p in paints)}; target 1.5 s)")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        t = time.perf_counter()
        root = build_study(folder, args.individuals)
        print(f"study of {args.individuals} individuals built in {time.perf_counter() - t:.1f} s")
        figs = asyncio.run(live_update(root, folder, args.bootstrap, args.rounds))
    print(f"first point estimates after opening: {figs['first_points'][0]:.2f} s")
    print(f"another process's batch, commit to poll seeing it: median {statistics.median(figs['commit_to_poll']):.2f} s "
          f"(poll every 0.5 s)")
    print(f"poll seeing it to new point estimates on screen: median {statistics.median(figs['points']):.2f} s, "
          f"max {max(figs['points']):.2f} s (runs: {', '.join(f'{p:.2f}' for p in figs['points'])}; target 1 s)")
    if figs["intervals"]:
        from fieldslope.tui.pipeline import interval_stages

        stages = interval_stages(args.bootstrap)
        if len(stages) > 1:
            print(f"then intervals from the first {stages[0]} resamples on screen after a further "
                  f"median {statistics.median(figs['first_stage']):.1f} s "
                  f"(runs: {', '.join(f'{p:.1f}' for p in figs['first_stage'])})")
        print(f"then bootstrap intervals ({args.bootstrap} resamples) on screen after a further "
              f"median {statistics.median(figs['intervals']):.1f} s "
              f"(runs: {', '.join(f'{p:.1f}' for p in figs['intervals'])})")


if __name__ == "__main__":
    main()
