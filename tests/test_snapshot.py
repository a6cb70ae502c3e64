"""The snapshot the dashboard panels draw from holds the store's own typed records."""

from __future__ import annotations

from fieldslope.schemas.store_types import BatchInfo, HeritabilityEntry, StoredFlag
from fieldslope.tui.loading import load_snapshot


def test_snapshot_holds_typed_records_and_counts_stored_batches(study, write_batch, hopper_rows):
    rows = hopper_rows("2025", "Gull Flat", n=30, seed=3)
    rows[4]["wing"] = "9.9"                                  # above the 6.0 mm maximum and far out in its cell: out_of_range and outlier
    assert study.store.import_file(write_batch(rows, "a.csv"), operator="t").outcome == "stored"
    bad = [dict(r) for r in hopper_rows("2025", "Reed Bend", n=10, seed=4)]
    bad[0]["tibia"] = "thick"
    assert study.store.import_file(write_batch(bad, "b.csv"), operator="t").outcome == "refused"
    study.store.set_heritability("wing", 0.3, None, "sister population", operator="t")
    study.store.set_heritability("wing", 0.4, 0.05, "2019 breeding design", operator="t")

    snap = load_snapshot(study.root, generation=1, version=0, sensitivity=False, refreshed_at="t")
    assert all(isinstance(b, BatchInfo) for b in snap.batches) and len(snap.batches) == 2
    assert snap.n_batches == 1                               # the refused batch stored nothing
    assert all(isinstance(f, StoredFlag) for f in snap.flags)
    assert [f.kind for f in snap.flags if f.is_open] == ["out_of_range", "outlier"] and snap.flags_open == 2
    assert all(isinstance(e, HeritabilityEntry) for e in snap.heritability)
    latest = snap.entered_h2("wing")
    assert (latest.value, latest.se, latest.source) == (0.4, 0.05, "2019 breeding design")
    assert snap.entered_h2("tibia") is None and snap.h2 == {"wing": (0.4, 0.05, "2019 breeding design")}
    assert snap.sensitivity is None and not snap.outliers_left_out
