"""Same seed, same numbers: write an estimates table to CSV, or compare two such files.

Run the same command in two checkouts (or two commits' environments) and compare:

    python benchmarks/same_numbers.py demo --out new.csv
    python benchmarks/same_numbers.py synthetic --individuals 100000 --bootstrap 200 --out new.csv
    python benchmarks/same_numbers.py compare old.csv new.csv [--tol 1e-7]

``demo`` takes the demo season's batches into a fresh study and estimates with
500 resamples and seed 4242 (as tests/test_demo.py does; its reference file,
made at an earlier commit, is tests/data/demo_estimates_reference.csv).
``synthetic`` is a generated study (two seasons, three sites, parents recorded,
0/1 and count fitness and their product) large enough for the resampling to
work in several blocks. ``compare`` prints the largest difference of each
numeric column over the rows both files have, and the rows only one has; it
exits 1 when a difference exceeds ``--tol`` (relative to max(1, |value|)).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

KEY = ["season", "site", "fitness", "quantity", "term"]
NUMBERS = ["estimate", "se", "ci_low", "ci_high", "p_value", "n"]


def demo_table(bootstrap: int, seed: int) -> pd.DataFrame:
    from fieldslope.schemas.study import Study
    from fieldslope.tui.bridge import estimates_for_frame
    from fieldslope.tui.demo import create_demo_study, feed_batches

    with tempfile.TemporaryDirectory() as tmp:
        target = create_demo_study(Path(tmp) / "study")
        feed_batches(target, delay=0)
        with Study.open(target) as study:
            frame = study.store.effective_frame()
            protocol = study.protocol
    return estimates_for_frame(frame, protocol, bootstrap=bootstrap, seed=seed).table


def synthetic_frame(n: int, seed: int = 11) -> pd.DataFrame:
    """``n`` individuals a season, two seasons, three sites; the second season's parents are the first's."""
    rng = np.random.default_rng(seed)
    parts = []
    for s, season in enumerate(("2031", "2032")):
        z = rng.multivariate_normal([20.0, 5.0, 80.0], [[4, 0.6, 3], [0.6, 0.5, 0.4], [3, 0.4, 100]], size=n)
        z[rng.random((n, 3)) < 0.01] = np.nan
        eta = 0.3 + 0.4 * (np.nan_to_num(z[:, 0], nan=20) - 20) / 2
        alive = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
        young = rng.poisson(2 + 0.1 * (np.nan_to_num(z[:, 2], nan=80) - 80) / 10, n).clip(0) * alive
        ids = np.char.add(f"S{season}-", np.arange(n).astype(str))
        frame = pd.DataFrame({"tag": ids, "season": season, "site": rng.choice(["North", "East", "West"], n),
                              "t1": z[:, 0], "t2": z[:, 1], "t3": z[:, 2], "alive": alive, "young": young})
        if s:  # families of about four from the first season's individuals
            fam = rng.integers(0, n // 4, n)
            frame["dam"] = np.char.add("S2031-", (2 * fam).astype(str))
            frame["sire"] = np.char.add("S2031-", (2 * fam + 1).astype(str))
        else:
            frame["dam"] = pd.NA
            frame["sire"] = pd.NA
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def synthetic_table(n: int, bootstrap: int, seed: int) -> pd.DataFrame:
    from fieldslope.analysis.design import Design
    from fieldslope.analysis.table import estimate_table

    design = Design(traits=("t1", "t2", "t3"), fitness={"alive": "binary", "young": "count"},
                    totals={"total": ("alive", "young")}, id="tag", season="season", groups=("site",),
                    mother="dam", father="sire")
    return estimate_table(synthetic_frame(n), design, bootstrap=bootstrap, seed=seed).table


def compare(old_file: str, new_file: str, tol: float) -> int:
    read = dict(dtype={"season": str, "site": str, "fitness": str, "quantity": str, "term": str},
                keep_default_na=False, na_values={c: [""] for c in NUMBERS})
    old, new = pd.read_csv(old_file, **read), pd.read_csv(new_file, **read)
    both = old.merge(new, on=KEY, how="outer", suffixes=("_old", "_new"), indicator=True)
    only_old = both[both["_merge"] == "left_only"]
    only_new = both[both["_merge"] == "right_only"]
    both = both[both["_merge"] == "both"]
    print(f"{len(both)} rows in both; {len(only_old)} only in {old_file}; {len(only_new)} only in {new_file}")
    worst = 0.0
    for col in NUMBERS:
        a, b = both[f"{col}_old"].to_numpy(float), both[f"{col}_new"].to_numpy(float)
        missing = np.isnan(a) != np.isnan(b)
        diff = np.where(np.isnan(a) & np.isnan(b), 0.0, np.abs(a - b) / np.maximum(1.0, np.abs(a)))
        diff = np.where(missing, np.inf, diff)
        big = float(np.nanmax(diff)) if len(diff) else 0.0
        worst = max(worst, big)
        print(f"  {col:<9} largest difference {big:.3g} ({int(missing.sum())} rows missing on one side only)")
    for _, r in only_old.head(10).iterrows():
        print("  only old:", " · ".join(str(r[k]) for k in KEY))
    bad = worst > tol or len(only_old) > 0
    print("DIFFERENT" if bad else f"same within {tol:g}")
    return 1 if bad else 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="what", required=True)
    d = sub.add_parser("demo")
    d.add_argument("--bootstrap", type=int, default=500)
    d.add_argument("--seed", type=int, default=4242)
    d.add_argument("--out", required=True)
    s = sub.add_parser("synthetic")
    s.add_argument("--individuals", type=int, default=100_000)
    s.add_argument("--bootstrap", type=int, default=200)
    s.add_argument("--seed", type=int, default=20260601)
    s.add_argument("--out", required=True)
    c = sub.add_parser("compare")
    c.add_argument("old")
    c.add_argument("new")
    c.add_argument("--tol", type=float, default=1e-7)
    args = ap.parse_args()
    if args.what == "compare":
        return compare(args.old, args.new, args.tol)
    table = (demo_table(args.bootstrap, args.seed) if args.what == "demo"
             else synthetic_table(args.individuals, args.bootstrap, args.seed))
    table.to_csv(args.out, index=False, float_format="%.17g", lineterminator="\n")
    print(f"wrote {len(table)} rows to {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
