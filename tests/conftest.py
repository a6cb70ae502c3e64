"""Shared fixtures: an invented species' protocol, a fresh study folder, a batch writer."""

from __future__ import annotations

from pathlib import Path

import pytest

# An invented leafhopper at two invented saltmarsh sites (test data only).
PROTOCOL_TEXT = """\
[study]
name = "Saltbush hoppers"
id = "tag"
season = "season"
groups = ["site"]

[traits.wing]
unit = "mm"
min = 3.0
max = 6.0
label = "forewing length"

[traits.tibia]
unit = "mm"
min = 1.0
max = 2.5

[fitness.survived]
kind = "binary"
[fitness.clutch]
kind = "count"
[fitness.total]
product = ["survived", "clutch"]

[parents]
mother = "dam"
father = "sire"

[checks]
outlier_z = 4.0
missing = ["NA"]
[checks.allowed]
site = ["Gull Flat", "Reed Bend"]
"""


@pytest.fixture
def protocol_text() -> str:
    return PROTOCOL_TEXT


@pytest.fixture
def protocol_file(tmp_path: Path, protocol_text: str) -> Path:
    path = tmp_path / "protocol-src.toml"
    path.write_text(protocol_text, encoding="utf-8")
    return path


@pytest.fixture
def study(tmp_path: Path, protocol_file: Path):
    from fieldslope.schemas.study import Study

    s = Study.create(tmp_path / "study", protocol_file)
    yield s
    s.close()


@pytest.fixture
def write_batch(tmp_path: Path):
    """write_batch(text_or_rows, name="batch.csv") -> Path. ``rows`` is a list of dicts (header from the
    first) or the file's text; bytes are written as they are."""
    folder = tmp_path / "batches"
    folder.mkdir(exist_ok=True)

    def write(content, name: str = "batch.csv") -> Path:
        path = folder / name
        if isinstance(content, bytes):
            path.write_bytes(content)
        elif isinstance(content, str):
            path.write_text(content, encoding="utf-8")
        else:
            rows = list(content)
            header = list(rows[0])
            lines = [",".join(header)] + [",".join("" if r.get(h) is None else str(r[h]) for h in header)
                                          for r in rows]
            path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        return path

    return write


@pytest.fixture
def hopper_rows():
    """hopper_rows(season, site, n=40, seed=1, start=0) -> list of dicts for the protocol above (invented data).

    Forewing length drives survival and clutch size, so every estimate is defined."""
    import numpy as np

    def rows(season: str, site: str, n: int = 40, seed: int = 1, start: int = 0) -> list[dict]:
        rng = np.random.default_rng(seed)
        out = []
        for i in range(n):
            wing = float(np.clip(rng.normal(4.5, 0.4), 3.2, 5.8))
            tibia = float(np.clip(rng.normal(1.7, 0.15) + 0.1 * (wing - 4.5), 1.1, 2.4))
            alive = int(rng.random() < 1 / (1 + np.exp(-(0.3 + 2.0 * (wing - 4.5)))))
            clutch = int(rng.poisson(3 + 2 * max(tibia - 1.5, 0))) if alive else 0
            out.append({"tag": f"{site[:2].upper()}{season[-2:]}-{start + i:04d}", "season": season, "site": site,
                        "wing": f"{wing:.2f}", "tibia": f"{tibia:.2f}", "survived": alive, "clutch": clutch})
        return out

    return rows


@pytest.fixture
def huge_file(tmp_path: Path) -> Path:
    """A 1.2 GB CSV with a header line, sparse (costs no disk)."""
    big = tmp_path / "scan.csv"
    with open(big, "wb") as fh:
        fh.write(b"tag,season,site\n")
        fh.truncate(1_200_000_000)
    return big


def peak_memory(work):
    """(work(), the peak bytes Python allocated while it ran), by tracemalloc."""
    import tracemalloc

    tracemalloc.start()
    try:
        out = work()
        return out, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
