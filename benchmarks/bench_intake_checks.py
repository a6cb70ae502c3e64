"""Speed of reading and checking a batch: 100,000 rows x 10 columns (CSV), and a smaller XLSX.

Prints rows per second for read_sheet, check_sheet and both. The whole import
(with the store) should reach 50,000 rows/s, so this part must be well faster.

    python benchmarks/bench_intake_checks.py [--rows N]
"""

from __future__ import annotations

import argparse
import io
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fieldslope.schemas.protocol import parse_protocol  # noqa: E402
from fieldslope.schemas.readers import read_sheet  # noqa: E402
from fieldslope.schemas.validate import check_sheet  # noqa: E402

PROTOCOL = parse_protocol("""\
[study]
id = "ring"
season = "year"
groups = ["field"]
[traits.elytra]
unit = "mm"
min = 3.0
max = 9.0
[traits.horn]
[traits.pronotum]
[fitness.survived]
kind = "binary"
[fitness.clutch]
kind = "count"
[fitness.gain]
kind = "continuous"
[parents]
mother = "dam"
[checks]
missing = ["NA"]
[checks.allowed]
field = ["Cinder Flat", "Moss Gully"]
""")
COLUMNS = ["ring", "year", "field", "elytra", "horn", "pronotum", "survived", "clutch", "gain", "dam"]


def make_rows(n: int, seed: int = 7) -> list[list[str]]:
    rng = np.random.default_rng(seed)
    fields = np.where(rng.random(n) < 0.5, "Cinder Flat", "Moss Gully")
    elytra = rng.normal(6, 0.8, n).round(2)
    horn = rng.normal(1, 0.2, n).round(3)
    pron = rng.normal(2, 0.3, n).round(3)
    surv = rng.integers(0, 2, n)
    clutch = rng.poisson(3, n)
    gain = rng.gamma(2, 0.5, n).round(3)
    rows = []
    for i in range(n):
        rows.append([f"R{i:06d}", "2025", fields[i], f"{elytra[i]}", f"{horn[i]}", f"{pron[i]}", f"{surv[i]}",
                     f"{clutch[i]}", f"{gain[i]}", "NA" if i % 7 else f"R{i // 7:06d}"])
    for i in range(0, n, 997):          # a sprinkle of bad cells, as in real sheets
        rows[i][3] = "5..2"
    return rows


def csv_bytes(rows: list[list[str]]) -> bytes:
    lines = [",".join(COLUMNS)] + [",".join(r) for r in rows]
    return ("\n".join(lines) + "\n").encode()


def xlsx_bytes(rows: list[list[str]]) -> bytes:
    import openpyxl
    wb = openpyxl.Workbook()   # not write_only: like a spreadsheet program, it stores the sheet's dimension
    ws = wb.active
    ws.append(COLUMNS)
    for r in rows:
        ws.append([r[0], int(r[1]), r[2], *(float(v) if v not in ("5..2",) else v for v in r[3:6]),
                   int(r[6]), int(r[7]), float(r[8]), r[9]])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def timed(label: str, n: int, fn, repeat: int = 3):
    """Best of ``repeat`` runs; wall time and this process's CPU time (steadier on a shared machine)."""
    best, best_cpu, result = float("inf"), float("inf"), None
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        result = fn()
        best = min(best, time.perf_counter() - t)
        best_cpu = min(best_cpu, time.process_time() - c)
    print(f"  {label:<14} wall {best * 1000:6.0f} ms {n / best:>9,.0f} rows/s   "
          f"cpu {best_cpu * 1000:6.0f} ms {n / best_cpu:>9,.0f} rows/s")
    return result, best, best_cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--xlsx-rows", type=int, default=20_000)
    args = ap.parse_args()

    rows = make_rows(args.rows)
    data = csv_bytes(rows)
    print(f"CSV: {args.rows:,} rows x {len(COLUMNS)} columns, {len(data) / 2**20:.1f} MB (best of 3)")
    sheet, t_read, c_read = timed("read_sheet", args.rows, lambda: read_sheet("bench.csv", data))
    check_sheet(PROTOCOL, sheet)  # first call builds and caches the schema
    report, t_check, c_check = timed("check_sheet", args.rows, lambda: check_sheet(PROTOCOL, sheet))
    print(f"  {'read + check':<14} wall {(t_read + t_check) * 1000:6.0f} ms {args.rows / (t_read + t_check):>9,.0f} "
          f"rows/s   cpu {(c_read + c_check) * 1000:6.0f} ms {args.rows / (c_read + c_check):>9,.0f} rows/s")
    print(f"  errors {len(report.errors):,}, flags {len(report.flags):,}, valid rows {len(report.valid):,}")

    tracemalloc.start()
    check_sheet(PROTOCOL, read_sheet("bench.csv", data))
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(f"  peak Python memory (read + check): {peak / 2**20:.0f} MB")

    xrows = rows[: args.xlsx_rows]
    xdata = xlsx_bytes(xrows)
    print(f"XLSX: {len(xrows):,} rows, {len(xdata) / 2**20:.1f} MB")
    xsheet, t_xread, c_xread = timed("read_sheet", len(xrows), lambda: read_sheet("bench.xlsx", xdata), repeat=1)
    _, t_xcheck, c_xcheck = timed("check_sheet", len(xrows), lambda: check_sheet(PROTOCOL, xsheet), repeat=1)
    print(f"  {'read + check':<14} wall {(t_xread + t_xcheck) * 1000:6.0f} ms "
          f"{len(xrows) / (t_xread + t_xcheck):>9,.0f} rows/s   cpu {(c_xread + c_xcheck) * 1000:6.0f} ms "
          f"{len(xrows) / (c_xread + c_xcheck):>9,.0f} rows/s")


if __name__ == "__main__":
    main()
