"""Estimates kept between runs in the study folder (``cache/``), keyed by everything they depend on.

The key is a digest of: the record's state (``Store.record_state``: the last row of every append-only
table, so any new batch, resolution or h² entry changes it), the protocol, the estimators' source code,
and the options (resamples, seed, season, site, fitness measure, ...). A key that matches is therefore
the same computation, and its result is read back instead of computed again: ``summary``, ``changes`` and
``report`` run after ``estimate`` (or after each other) read what was worked out once.

Files are JSON (never pickle: the study folder is shared by the group), written atomically (a
temporary file renamed over); the newest ``KEEP`` are kept. A file that cannot be read is computed
again; a folder that cannot be written is said once and the result is still returned.
"""

from __future__ import annotations

import hashlib
import json
import os
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable

if TYPE_CHECKING:  # pragma: no cover
    from fieldslope.analysis.table import Estimates

CACHE_DIR = "cache"
KEEP = 24
FORMAT = 1
CODE = ("bridge.py", "estimate_cache.py", "summary.py", "changes.py")


@lru_cache(maxsize=1)
def code_digest() -> str:
    """Digest of the estimators' sources (``fieldslope.analysis``) and of the modules here that shape what
    is kept (``CODE``): results kept by another version of the code are never read back."""
    from importlib.resources import files

    h = hashlib.sha256()
    analysis = files("fieldslope.analysis")
    for entry in sorted((e for e in analysis.iterdir() if e.name.endswith(".py")), key=lambda e: e.name):
        h.update(entry.name.encode() + b"\0" + entry.read_bytes())
    here = files("fieldslope.tui")
    for name in CODE:
        h.update(here.joinpath(name).read_bytes())
    return h.hexdigest()


def table_options(*, bootstrap: int, seed: int | None, season: str | None = None, site: str | None = None,
                  fitness: str | None = None, pedigree: bool = False, without_open_outliers: bool = False,
                  random_effects: str = "dl") -> dict:
    """The options of an estimates table of the whole record with the entered h² (``fieldslope estimate``,
    the report): one spelling, so a table worked out by one is read back by the other."""
    return {"what": "table", "bootstrap": bootstrap, "seed": seed, "season": season, "site": site, "fitness": fitness,
            "pedigree": pedigree, "without_open_outliers": without_open_outliers, "random_effects": random_effects}


def cache_key(study, options: dict) -> str:
    text = json.dumps({"format": FORMAT, "state": list(study.store.record_state()), "protocol": repr(study.protocol),
                       "code": code_digest(), "options": options}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:40]


def _plain_estimates(est: Estimates) -> dict:
    """The table column by column (floats written exactly, NaN as NaN, a missing n as null) and the notes."""
    import pandas as pd

    columns = {c: [None if v is pd.NA else v for v in est.table[c].astype(object).tolist()] for c in est.table.columns}
    return {"columns": columns, "notes": [[n.season, n.site, n.fitness, n.quantity, n.message] for n in est.notes]}


def _estimates(data: dict) -> Estimates:
    import numpy as np
    import pandas as pd

    from fieldslope.analysis.table import COLUMNS, Estimates, Note

    cols = data["columns"]
    if list(cols) != COLUMNS:
        raise ValueError("other columns")
    table = pd.DataFrame({c: cols[c] for c in COLUMNS[:5]})
    for c in COLUMNS[5:-1]:
        table[c] = np.array([np.nan if v is None else v for v in cols[c]], dtype=np.float64)
    table["n"] = pd.array(cols["n"], dtype="Int64")
    return Estimates(table=table, notes=tuple(Note(*n) for n in data["notes"]))


def cached(study, options: dict, compute: Callable[[], Estimates | None],
           say: Callable[[str], None] | None = None) -> Estimates | None:
    """The estimates for ``options`` on ``study``'s record as it is now: read back when kept, else
    ``compute()`` (None is not kept). ``say`` hears one sentence when the result cannot be kept."""
    return kept(study, options, compute, say, encode=_plain_estimates, decode=_estimates)


def kept(study, options: dict, compute: Callable[[], Any], say: Callable[[str], None] | None = None, *,
         encode: Callable[[Any], Any] = lambda v: v, decode: Callable[[Any], Any] = lambda v: v):
    """``compute()`` for ``options`` on the record as it is now, or its result kept by an earlier run
    (``encode`` makes it plain JSON data, ``decode`` takes it back; None is not kept)."""
    folder = Path(study.root) / CACHE_DIR
    path = folder / f"estimates-{cache_key(study, options)}.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        if data.get("format") == FORMAT:
            return decode(data["value"])
    except (OSError, ValueError, KeyError, TypeError, AttributeError):  # not kept, damaged or another format
        pass
    value = compute()
    if value is None:
        return None
    try:
        folder.mkdir(exist_ok=True)
        tmp = path.with_name(f"{path.name}.{os.getpid()}.part")
        tmp.write_text(json.dumps({"format": FORMAT, "value": encode(value)}), encoding="utf-8")
        os.replace(tmp, path)
        _prune(folder)
    except OSError as exc:
        if say is not None:
            say(f"the estimates could not be kept for the next run in {folder} ({exc.strerror or exc}); "
                "they will be computed again next time.")
    return value


def _prune(folder: Path) -> None:
    """Keep the newest ``KEEP`` files (older states of the record are not asked for again)."""
    def age(path: Path) -> float:
        try:
            return path.stat().st_mtime
        except OSError:     # another process removed it meanwhile
            return 0.0

    for old in sorted(folder.glob("estimates-*.json"), key=age, reverse=True)[KEEP:]:
        old.unlink(missing_ok=True)
