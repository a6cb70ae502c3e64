"""Record store speed: import with validation, effective-data rebuild, change polling.

    python benchmarks/bench_store.py [--rows 100000]

Targets: import >= 50,000 rows/s (100,000 rows x 10 columns), effective data for
10,000 individuals <= 100 ms, data_version < 1 ms per poll. Also printed: the time to open
a 100,000-row store with and without the check made after an unclean shutdown.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fieldslope.schemas.study import Study  # noqa: E402

PROTOCOL = """\
[study]
name = "bench"
id = "tag"
season = "season"
groups = ["site"]
[traits.t1]
min = 0.0
max = 100.0
[traits.t2]
[traits.t3]
[traits.t4]
[fitness.alive]
kind = "binary"
[fitness.young]
kind = "count"
[parents]
mother = "dam"
[checks]
[checks.allowed]
site = ["North", "South"]
"""


def columns(n: int, seed: int):
    rng = np.random.default_rng(seed)
    t = rng.normal(50, 5, size=(n, 4)).round(3)
    alive = (rng.random(n) < 0.6).astype(int)
    young = rng.poisson(2, n) * alive
    return t, alive, young


def batch(n: int, seed: int, season: str = "2025", start: int = 0) -> bytes:
    """n rows x 10 columns: tag, season, site, t1..t4, alive, young, dam."""
    t, alive, young = columns(n, seed)
    lines = ["tag,season,site,t1,t2,t3,t4,alive,young,dam"]
    for i in range(n):
        site = "North" if i % 2 else "South"
        lines.append(f"K{start + i:07d},{season},{site},{t[i, 0]},{t[i, 1]},{t[i, 2]},{t[i, 3]},"
                     f"{alive[i]},{young[i]},")
    return ("\n".join(lines) + "\n").encode()


def census(n: int, seed: int) -> bytes:
    """A fitness census over batch(n, seed): the same counts, 1 % of them recounted differently."""
    _, alive, young = columns(n, seed)
    young = young + (np.arange(n) % 100 == 0)
    lines = ["tag,season,alive,young"] + [f"K{i:07d},2025,{alive[i]},{young[i]}" for i in range(n)]
    return ("\n".join(lines) + "\n").encode()


class Clock:
    """Wall time and this process's CPU time (the machine may be shared: CPU time is the steadier figure)."""

    def __enter__(self):
        self.wall, self.cpu = time.perf_counter(), time.process_time()
        return self

    def __exit__(self, *exc):
        self.wall, self.cpu = time.perf_counter() - self.wall, time.process_time() - self.cpu


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=100_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        proto = Path(tmp) / "p.toml"
        proto.write_text(PROTOCOL)
        study = Study.create(Path(tmp) / "s", proto)
        store = study.store

        data = batch(args.rows, 1)
        with Clock() as c:
            res = store.import_bytes("big.csv", data)
        print(f"import with validation, {res.n_stored:,} rows x 10 columns ({len(data) / 2**20:.1f} MB, "
              f"{res.outcome}, {len(res.flags)} flags): {c.wall:.2f} s wall = {res.n_stored / c.wall:,.0f} rows/s; "
              f"{c.cpu:.2f} s CPU = {res.n_stored / c.cpu:,.0f} rows/s (target >= 50,000)")

        with Clock() as c:
            res = store.import_bytes("census.csv", census(args.rows, 1))
        print(f"fitness census of {args.rows:,} rows over the record (census, differs, outlier checks): "
              f"{c.wall:.2f} s wall = {res.n_stored / c.wall:,.0f} rows/s; {c.cpu:.2f} s CPU = "
              f"{res.n_stored / c.cpu:,.0f} rows/s; {len(res.flags):,} flags")

        # effective data for 10,000 individuals: a fresh study, measurements plus a census batch
        study2 = Study.create(Path(tmp) / "s2", proto)
        study2.store.import_bytes("m.csv", batch(10_000, 3))
        late = ["tag,season,young"] + [f"K{i:07d},2025,{i % 4}" for i in range(0, 10_000, 2)]
        study2.store.import_bytes("c.csv", ("\n".join(late) + "\n").encode())
        flags = study2.store.flags()
        for f in flags[:200]:
            study2.store.resolve_flag(f.id, "exclude" if f.id % 2 else "keep", reason="bench")
        walls, cpus = [], []
        for _ in range(15):
            with Clock() as c:
                frame = study2.store.effective_frame()
            walls.append(c.wall)
            cpus.append(c.cpu)
        print(f"effective data, {len(frame):,} individuals from 15,000 records: median "
              f"{1000 * float(np.median(walls)):.1f} ms wall, {1000 * float(np.median(cpus)):.1f} ms CPU "
              f"(target <= 100 ms)")

        t0 = time.perf_counter()
        n = 20_000
        for _ in range(n):
            study2.store.data_version()
        print(f"data_version: {1e6 * (time.perf_counter() - t0) / n:.1f} µs per poll (target < 1 ms)")
        study.close()
        study2.close()
        open_times(Path(tmp), proto, args.rows)


def open_times(tmp: Path, proto: Path, rows: int) -> None:
    """Opening a study: the normal case (clean close, no -wal: no check) against the case after an
    unclean shutdown or beside a running session (-wal left: quick_check + foreign_key_check)."""
    import sqlite3

    study = Study.create(tmp / "s3", proto)
    study.store.import_bytes("big.csv", batch(rows, 5))
    root, db = study.root, study.db_path
    study.close()

    def median_open(expect_check: bool) -> float:
        walls = []
        for _ in range(7):
            with Clock() as c:
                s = Study.open(root)
            assert s.store.checked_on_open == expect_check and not s.store.damaged
            s.close()
            walls.append(c.wall)
        return 1000 * float(np.median(walls))

    clean = median_open(False)
    other = sqlite3.connect(db, isolation_level=None)       # another session that has written: -wal stays
    other.execute("INSERT INTO heritability(trait, value, se, source, operator, created) "
                  "VALUES ('t1', 0.3, NULL, 'bench', 'bench', 't')")
    checked = median_open(True)
    other.close()
    print(f"open a {rows:,}-row store ({db.stat().st_size / 2**20:.1f} MB): {clean:.1f} ms after a clean close "
          f"(no check), {checked:.1f} ms with the -wal left over (quick_check + foreign_key_check), median of 7")


if __name__ == "__main__":
    main()
