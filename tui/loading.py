"""Worker-side reading for the dashboard: open the study, poll it, build snapshots.

Every function here runs in a worker thread and opens its own store
connection; nothing here imports Textual. The numbers come from the
estimators through :mod:`tui.bridge` (one path from records to numbers).
"""

from __future__ import annotations

from pathlib import Path
from types import MappingProxyType
from typing import Callable, NamedTuple

from fieldslope.common.names import Q, Outcome
from fieldslope.tui.snapshot import Sensitivity, Snapshot


class Opened(NamedTuple):
    """What opening a study found: its protocol, whether it is read-only and why, and whether any batch
    went into the record yet (a new study opens on the Intake screen)."""

    protocol: object
    readonly: bool
    warning: str
    has_data: bool


def open_study(study_dir: Path) -> Opened:
    """Open the study and read from it once; fall back to read-only when it cannot be written.

    Raises FieldslopeError with one sentence when the study cannot be read at all (missing, damaged).
    """
    from fieldslope.common.errors import FieldslopeError
    from fieldslope.schemas.study import Study

    try:
        study = Study.open(study_dir)
    except FieldslopeError as exc:
        try:
            study = Study.open(study_dir, readonly=True)
            stored = _any_stored(study.store.batches())
        except FieldslopeError:
            raise exc from None
        _close(study)
        return Opened(study.protocol, True, f"{exc} The dashboard is read-only until this is fixed.", stored)
    try:
        stored = _any_stored(study.store.batches())   # a damaged file fails here, with the store's sentence
        damaged = getattr(study.store, "damaged", "")   # the open-time check after an unclean shutdown
    finally:
        _close(study)
    if damaged:
        return Opened(study.protocol, True, f"{damaged} The dashboard is read-only until this is fixed.", stored)
    if not writable(study.db_path):
        return Opened(study.protocol, True, (
            f"{study.db_path}: you cannot write to the record store (file or folder permissions), so the "
            "dashboard is read-only; ask the station manager for group write access to the study folder."), stored)
    return Opened(study.protocol, False, "", stored)


def _any_stored(batches) -> bool:
    """True when some batch put rows into the record (stored or partly stored)."""
    return any(b.outcome in (Outcome.STORED, Outcome.PARTIAL) for b in batches)


def writable(db_path: Path) -> bool:
    """True if this user may write the store file and create its journal files beside it."""
    from fieldslope.schemas.study import account_can_write

    return account_can_write(Path(db_path).parent)


LOCKED_SENTENCE = ("The record store is in use by another program, so the dashboard is read-only for now: "
                   "you can browse, and taking in, resolving and entering h² work again once it is free.")


def can_write_now(study) -> bool:
    """A cheap probe: can this study's store start a write transaction right now?

    Uses ``Store.writable()`` where the store has it; otherwise tries
    ``BEGIN IMMEDIATE`` on a short-lived connection with a 0.1 s wait.
    """
    probe = getattr(study.store, "writable", None)
    if probe is not None:
        return bool(probe())
    import sqlite3

    try:
        conn = sqlite3.connect(str(study.db_path), timeout=0.1, isolation_level=None)
        try:
            conn.execute("BEGIN IMMEDIATE")
            conn.execute("ROLLBACK")
        finally:
            conn.close()
    except sqlite3.Error:
        return False
    return True


def _writing(study_dir: Path):
    """Open the study for one write; refuse at once (one sentence) when another program holds the store."""
    from fieldslope.common.errors import BusyError
    from fieldslope.schemas.study import Study

    study = Study.open(study_dir)
    if not can_write_now(study):
        _close(study)
        raise BusyError(LOCKED_SENTENCE)
    return study


def _close(study) -> None:
    close = getattr(getattr(study, "store", None), "close", None) or getattr(study, "close", None)
    if close:
        close()


class Poller:
    """One long-lived read-only connection used only to read the store's change counter."""

    def __init__(self, study_dir: Path):
        from fieldslope.schemas.study import Study

        self.study_dir = study_dir
        self.study = Study.open(study_dir, readonly=True)
        self._writer = None

    def version(self) -> int:
        return int(self.study.store.data_version())

    def writable(self) -> bool | None:
        """Whether a write could start now (None when this account cannot open the store for writing)."""
        from fieldslope.common.errors import FieldslopeError
        from fieldslope.schemas.study import Study

        try:
            if self._writer is None:
                self._writer = Study.open(self.study_dir)
            return can_write_now(self._writer)
        except FieldslopeError:
            return None

    def close(self) -> None:
        _close(self.study)
        if self._writer is not None:
            _close(self._writer)


# what the sensitivity comparison shows beside the figures without the open outliers: S, β and γ
SENSITIVITY_QUANTITIES = (Q.DIFFERENTIAL, Q.GRADIENT, Q.QUADRATIC, Q.CORRELATIONAL)


def load_snapshot(study_dir: Path, *, generation: int, version: int, sensitivity: bool,
                  refreshed_at: str, readonly: bool = False) -> Snapshot:
    """Read the store once and compute point estimates (bootstrap 0)."""
    from fieldslope.schemas.study import Study
    from fieldslope.tui.bridge import estimates_for_frame

    study = Study.open(study_dir, readonly=True)
    try:
        store = study.store
        frame = store.effective_frame(without_open_outliers=sensitivity)
        included = store.effective_frame() if sensitivity else None
        flags = tuple(store.flags(include_resolved=True))
        batches = tuple(store.batches())
        h2 = store.heritability_records()
        h2_values = store.heritability() or None
    finally:
        _close(study)
    est = estimates_for_frame(frame, study.protocol, bootstrap=0, h2=h2_values)
    kept_in = None
    if included is not None:
        # the other side of the sensitivity comparison: S, β and γ with the open outliers kept in
        t = estimates_for_frame(included, study.protocol, bootstrap=0, h2=h2_values).table
        t = t[t["quantity"].isin(SENSITIVITY_QUANTITIES) & t["estimate"].notna()]
        kept_in = Sensitivity(MappingProxyType({
            (s, site, f, q, term): float(v) for s, site, f, q, term, v in zip(
                t["season"], t["site"], t["fitness"], t["quantity"], t["term"], t["estimate"])}))
    return Snapshot(
        protocol=study.protocol, table=est.table, notes=tuple(est.notes), frame=frame, flags=flags,
        batches=batches, heritability=h2, data_version=version, refreshed_at=refreshed_at,
        sensitivity=kept_in, intervals=False, generation=generation, readonly=readonly, h2=h2_values,
    )


def add_intervals(snap: Snapshot, *, bootstrap: int, seed: int | None,
                  progress: Callable[..., None] | None, refreshed_at: str) -> Snapshot:
    """The same data with bootstrap intervals and permutation p-values from ``bootstrap`` resamples."""
    from fieldslope.tui.bridge import estimates_for_frame

    est = estimates_for_frame(snap.frame, snap.protocol, bootstrap=bootstrap, seed=seed,
                              h2=snap.h2, progress=progress)
    return snap.with_(table=est.table, notes=tuple(est.notes), intervals=True, resamples=bootstrap)


def batch_trend(study_dir: Path, protocol, season: str, fitness: str, sensitivity: bool,
                should_stop: Callable[[], bool] = lambda: False):
    """β of each trait in ``season`` after each stored batch that changed that season's data
    (bootstrap 0, se-based 95 % interval β ± 1.96 se).

    Returns a list of dicts: batch, n, site, trait, estimate, se, ci_low, ci_high.
    """
    from fieldslope.schemas.study import Study
    from fieldslope.tui.bridge import estimates_for_frame

    study = Study.open(study_dir, readonly=True)
    out: list[dict] = []
    previous = last_figures = None
    try:
        store = study.store
        ids = [b.id for b in store.batches() if b.outcome != Outcome.REFUSED]
        for k in ids:
            if should_stop():
                break
            frame = store.effective_frame(without_open_outliers=sensitivity, as_of_batch=k)
            if frame.empty:
                continue
            sub = frame[frame[protocol.season_col].astype(str) == season].reset_index(drop=True)
            if sub.empty or (previous is not None and sub.equals(previous)):
                continue                       # this batch did not touch the season
            previous = sub
            t = estimates_for_frame(sub, protocol, bootstrap=0).table
            t = t[(t["season"] == season) & (t["fitness"] == fitness) & (t["quantity"] == Q.GRADIENT)]
            figures = t[["site", "term", "estimate", "se", "n"]].to_numpy().tolist()
            if figures == last_figures:
                continue                       # the batch changed nothing these gradients use
            last_figures = figures
            for row in t.itertuples(index=False):
                se = row.se if row.se == row.se else None
                out.append({"batch": k, "site": row.site, "trait": row.term, "estimate": row.estimate,
                            "se": se, "n": row.n,
                            "ci_low": None if se is None else row.estimate - 1.96 * se,
                            "ci_high": None if se is None else row.estimate + 1.96 * se})
    finally:
        _close(study)
    return out


def create_study(folder: Path, protocol_file: Path) -> None:
    """Create a study folder from a protocol file (raises FieldslopeError with one sentence)."""
    from fieldslope.schemas.study import Study

    _close(Study.create(folder, protocol_file))


def demo_study():
    """Create a fresh demo study; returns (folder, feed) for ``FieldslopeApp.demo_feed``."""
    from fieldslope.tui import demo

    target = demo.create_demo_study(None)
    return target, demo.demo_feed(target)


def resolve_flags(study_dir: Path, flag_ids: list[int], action: str, value: str | None, reason: str,
                  operator: str, again: bool = False) -> list:
    """Keep, exclude or correct flags (its own writing connection); returns the store's Resolutions. Of a
    group, a flag that an earlier decision of the group settled already (its twin on the same value, the
    other copy of a duplicated ID) is passed over."""
    study = _writing(study_dir)
    try:
        out = []
        for i in flag_ids:
            if len(flag_ids) > 1 and not again and not study.store.flag(i).is_open:
                continue
            out.append(study.store.resolve_flag(i, action=action, value=value, reason=reason, operator=operator,
                                                again=again))
        return out
    finally:
        _close(study)


def duplicate_copies(study_dir: Path, flag_id: int) -> list:
    """The copies (sheet rows, values, status) of the duplicated ID behind a duplicate ID flag."""
    from fieldslope.schemas.study import Study

    study = Study.open(study_dir, readonly=True)
    try:
        return study.store.copies(flag_id)
    finally:
        study.close()


def set_heritability(study_dir: Path, trait: str, value: float, se: float | None, source: str, operator: str) -> None:
    """Keep an entered h² (with its source) in the study."""
    study = _writing(study_dir)
    try:
        study.store.set_heritability(trait, value, se, source, operator)
    finally:
        _close(study)


def intake_dir(study_dir: Path) -> Path:
    from fieldslope.schemas.study import INTAKE_DIR

    return Path(study_dir) / INTAKE_DIR


_LISTERS: dict = {}


def list_intake(study_dir: Path) -> list[dict]:
    """The drop folder's files and their status (new, arriving, taken in, partial, refused).

    One Study object per folder is kept for listing, because a file counts as
    arrived only when two looks see the same size and time (``Study.intake_files``).
    """
    from fieldslope.schemas.study import Study

    key = Path(study_dir).resolve()
    study = _LISTERS.get(key)
    if study is None:
        study = _LISTERS[key] = Study.open(study_dir, readonly=True)
    out = []
    for f in study.intake_files():
        status = f"{f.status} ({f.batch_id})" if f.batch_id is not None else f.status
        out.append({"name": f.name, "path": f.path, "size": f.size, "status": status, "batch": f.batch_id,
                    "state": f.status, "problem": f.problem})
    return out


def check_file(study_dir: Path, path: Path):
    """Check a batch file against the study (nothing stored); returns (ImportResult, preview frame or None).

    The file is read as an import reads it (regular files only, a link in the drop folder not followed, a
    file over the size cap never read whole); a file that cannot be read raises SheetError (one sentence)."""
    from fieldslope.common.errors import SheetError
    from fieldslope.schemas.batch_file import read_batch_file
    from fieldslope.schemas.batch_plan import BatchPlan
    from fieldslope.schemas.readers import read_sheet
    from fieldslope.schemas.study import Study

    study = Study.open(study_dir, readonly=True)
    try:
        data = read_batch_file(Path(path), follow_links=not study.in_drop_folder(path))
        if isinstance(data, BatchPlan):          # over the size cap: refused from its size alone
            return study.store.check_file(path), None
        result = study.store.check_bytes(Path(path).name, data)
    finally:
        _close(study)
    try:
        preview = read_sheet(Path(path).name, data).frame.head(200)
    except SheetError:
        preview = None
    return result, preview


def import_file(study_dir: Path, path: Path, accept_valid: bool, operator: str):
    """Take a batch file in (its own writing connection); returns the ImportResult."""
    study = _writing(study_dir)
    try:
        return study.store.import_file(Path(path), operator=operator, accept_valid=accept_valid,
                                       follow_links=not study.in_drop_folder(path))
    finally:
        _close(study)
