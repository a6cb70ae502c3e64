"""Nothing lost: kill -9 during imports, a full disk, one importer with readers at once.

Each test runs real child processes against one study folder (SQLite in WAL mode).
"""

from __future__ import annotations

import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from fieldslope.schemas.study import Study

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(REPO)}


def batch_bytes(index: int, rows: int, out_of_range: bool = False) -> bytes:
    """Batch ``index``: ``rows`` new individuals (IDs unique per batch), valid throughout."""
    rng = np.random.default_rng(index)
    wing = rng.normal(4.5, 0.3, rows).round(2)
    if out_of_range:
        wing[0] = 9.5
    tibia = rng.normal(1.6, 0.1, rows).round(2)
    alive = rng.integers(0, 2, rows)
    lines = ["tag,season,site,wing,tibia,survived,clutch"]
    for i in range(rows):
        site = "Gull Flat" if i % 2 else "Reed Bend"
        lines.append(f"B{index:03d}-{i:05d},2024,{site},{wing[i]},{tibia[i]},{alive[i]},{2 * alive[i]}")
    return ("\n".join(lines) + "\n").encode()


def check_whole(db: Path) -> dict[int, int]:
    """Integrity ok, and every batch on record has all its rows: batch id -> rows."""
    conn = sqlite3.connect(db)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert conn.execute("PRAGMA foreign_key_check").fetchall() == []
        counts = dict(conn.execute("SELECT batch_id, count(*) FROM records GROUP BY batch_id").fetchall())
        stored = dict(conn.execute("SELECT id, n_stored FROM batches WHERE outcome = 'stored'").fetchall())
    finally:
        conn.close()
    assert counts == {b: n for b, n in stored.items() if n}
    return stored


IMPORTER = r"""
import sys
from pathlib import Path
from fieldslope.schemas.study import Study
study = Study.open(sys.argv[1])
files = sys.argv[2:]
study.store.check_bytes("warm-up.csv", b"tag,season,site,wing\nW1,2024,Gull Flat,4.5\n")  # load the checkers
print("ready", flush=True)
for name in files:
    study.store.import_file(name)
    print("done", name, flush=True)
"""


def test_kill_9_at_random_moments_leaves_each_batch_whole_or_absent(study, tmp_path):
    rows, rounds, per_child = 1500, 20, 6
    files = []
    for i in range(rounds + per_child):
        path = tmp_path / f"batch{i:02d}.csv"
        path.write_bytes(batch_bytes(i, rows))
        files.append(str(path))
    study.store.import_bytes("warm-up.csv", batch_bytes(998, rows))
    start = time.perf_counter()
    study.store.import_bytes("calibration.csv", batch_bytes(999, rows))
    one_import = time.perf_counter() - start
    rnd = random.Random(20240611)
    killed_during, finished = 0, []
    for r in range(rounds):
        todo = files[r:r + per_child]
        child = subprocess.Popen([sys.executable, "-c", IMPORTER, str(study.root), *todo], env=ENV,
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        assert child.stdout.readline().strip() == "ready"
        time.sleep(rnd.uniform(0.0, 3 * one_import))      # the child has about six imports of work
        child.send_signal(signal.SIGKILL)
        child.wait()
        killed_during += child.returncode == -signal.SIGKILL
        finished.append(child.stdout.read().count("done"))
        stored = check_whole(study.db_path)
        assert all(n == rows for n in stored.values())
        # the re-run takes in what is missing, once
        for name in todo:
            res = study.store.import_file(name)
            assert res.outcome in ("stored", "duplicate")
        check_whole(study.db_path)
    assert killed_during >= 0.6 * rounds       # most children died mid-work, not after finishing
    assert len(set(finished)) >= 2             # the kills landed at different points of the work
    shas = [b.sha256 for b in study.store.batches()]
    assert len(shas) == len(set(shas)) == rounds + per_child - 1 + 2   # + warm-up and calibration
    assert len(study.store.effective_frame()) == rows * (rounds + per_child + 1)


def test_disk_full_gives_one_sentence_and_the_store_stays_usable(study, tmp_path):
    resource = pytest.importorskip("resource")
    study.store.import_bytes("small.csv", batch_bytes(1, 20))
    big = tmp_path / "big.csv"
    big.write_bytes(batch_bytes(2, 20000))
    limit = sum(p.stat().st_size for p in study.root.iterdir() if p.is_file()) + 64 * 1024

    def small_files():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    r = subprocess.run([sys.executable, "-m", "fieldslope.tui.cli", "import", str(big), "--study", str(study.root)],
                       env=ENV, capture_output=True, text=True, timeout=120, preexec_fn=small_files)
    assert r.returncode == 1
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "disk is full" in lines[0] and "Traceback" not in r.stderr, r.stderr
    stored = check_whole(study.db_path)
    assert list(stored.values()) == [20]
    res = study.store.import_bytes("next.csv", batch_bytes(3, 50))
    assert res.outcome == "stored"
    assert len(study.store.effective_frame()) == 70


SAME_PROCESS = r"""
import resource, signal, sys
from fieldslope.common.errors import StoreError
from fieldslope.schemas.study import Study
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
study = Study.open(sys.argv[1])
big, small, limit = open(sys.argv[2], "rb").read(), open(sys.argv[3], "rb").read(), int(sys.argv[4])
hard = resource.getrlimit(resource.RLIMIT_FSIZE)[1]
resource.setrlimit(resource.RLIMIT_FSIZE, (limit, hard))
try:
    study.store.import_bytes("big.csv", big)
    print("stored?!")
except StoreError as exc:
    print("error:", exc)
resource.setrlimit(resource.RLIMIT_FSIZE, (hard, hard))      # space freed
print("then:", study.store.import_bytes("small.csv", small).outcome)
"""


def test_after_disk_full_the_same_store_object_keeps_working(study, tmp_path):
    pytest.importorskip("resource")
    study.store.import_bytes("first.csv", batch_bytes(1, 20))
    (tmp_path / "big.csv").write_bytes(batch_bytes(2, 20000))
    (tmp_path / "small.csv").write_bytes(batch_bytes(3, 30))
    limit = sum(p.stat().st_size for p in study.root.iterdir() if p.is_file()) + 64 * 1024
    r = subprocess.run([sys.executable, "-c", SAME_PROCESS, str(study.root), str(tmp_path / "big.csv"),
                        str(tmp_path / "small.csv"), str(limit)], env=ENV, capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert lines[0].startswith("error: the disk is full") and lines[1] == "then: stored"
    assert sorted(check_whole(study.db_path).values()) == [20, 30]


READER = r"""
import json, sys, time
from pathlib import Path
from fieldslope.schemas.study import Study
study = Study.open(sys.argv[1])
stop, rows, correct = Path(sys.argv[2]), int(sys.argv[3]), sys.argv[4] == "1"
seen, problems, loops, fixes = set(), [], 0, 0
deadline = time.monotonic() + 60
while time.monotonic() < deadline:
    finished = stop.exists()
    try:
        n = len(study.store.effective_frame())
        if n % rows:
            problems.append(f"effective data has {n} individuals, not a multiple of {rows}")
        seen.add(n)
        def snapshot(c):
            counts = dict(c.execute("SELECT batch_id, count(*) FROM records GROUP BY batch_id").fetchall())
            stored = dict(c.execute("SELECT id, n_stored FROM batches WHERE outcome = 'stored'").fetchall())
            return counts, stored
        counts, stored = study.store._read(snapshot)
        if counts != stored:
            problems.append(f"half a batch: {counts} vs {stored}")
        study.store.flags()
        if correct:
            for f in study.store.flags():
                study.store.resolve_flag(f.id, "keep", reason="checked in the field")
                fixes += 1
                break
    except Exception as exc:
        problems.append(f"{type(exc).__name__}: {exc}")
    loops += 1
    if finished:
        break
print(json.dumps({"problems": problems, "seen": sorted(seen), "loops": loops, "fixes": fixes}))
"""


def test_one_importer_three_readers_and_a_correction(study, tmp_path):
    rows, n_batches = 2000, 6
    files = []
    for i in range(n_batches):
        path = tmp_path / f"b{i}.csv"
        path.write_bytes(batch_bytes(100 + i, rows, out_of_range=True))
        files.append(str(path))
    stop = tmp_path / "stop"
    readers = [subprocess.Popen([sys.executable, "-c", READER, str(study.root), str(stop), str(rows),
                                 "1" if k == 2 else "0"], env=ENV, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True) for k in range(3)]
    time.sleep(1.0)
    importer = subprocess.run([sys.executable, "-c", IMPORTER, str(study.root), *files], env=ENV,
                              capture_output=True, text=True, timeout=120)
    stop.touch()
    assert importer.returncode == 0, importer.stderr
    assert importer.stdout.count("done") == n_batches
    reports = []
    for proc in readers:
        out, err = proc.communicate(timeout=120)
        assert proc.returncode == 0 and "locked" not in err.lower(), err
        reports.append(json.loads(out))
    for rep in reports:
        assert rep["problems"] == [], rep["problems"]
        assert rep["loops"] >= 2
    assert max(max(rep["seen"]) for rep in reports) == rows * n_batches
    assert reports[2]["fixes"] >= 1
    check_whole(study.db_path)
    assert len(Study.open(study.root).store.effective_frame()) == rows * n_batches
