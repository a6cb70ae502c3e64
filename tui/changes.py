"""``fieldslope changes --since WHEN``: what happened to a study since a moment or a batch.

New batches, flags opened and resolved, corrections, and the estimates that moved by more than
their earlier standard error. Without ``--since`` the moment is the last time this account ran the
command on this study, remembered per user in platformdirs' user state folder (one small JSON file
keyed by the study folder).

Estimates are compared at the batch level: "then" is the effective data as of the last batch taken
in up to WHEN (with the decisions on flags made before the next batch), "now" is today's data, both
with point estimates and OLS standard errors (bootstrap 0, as in the dashboard's live panels).
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from datetime import datetime, time, timezone
from pathlib import Path

from fieldslope.common.errors import FieldslopeError
from fieldslope.tui import cli_format as fmt
from fieldslope.tui.summary import finite_or_none, shown

WIDTH = fmt.WIDTH
MAX_LISTED = 25
STATE_FILE = "changes_seen.json"
# quantities compared for "moved": the estimates with a standard error of their own
MOVED_MIN_SE = 0.0


@dataclass(frozen=True)
class Since:
    """The starting point: a moment (UTC) and the last batch taken in by then (0: none)."""

    moment: datetime | None      # None: since the beginning
    batch: int                   # batches with a larger number are new
    said: str                    # how the output names it
    inclusive: bool = False      # times are kept to the second: a decision in that very second counts as new


def parse_when(text: str) -> tuple[str, object]:
    """``("batch", N)`` for ``12`` / ``#12`` / ``batch 12``; ``("time", aware datetime)`` for a date or time.

    A date means its midnight, a bare time means today at that time, both in this computer's time
    zone unless the text says otherwise. Raises FieldslopeError with one sentence.
    """
    raw = text.strip()
    m = re.fullmatch(r"(?:batch\s*|#)?(\d{1,9})", raw, flags=re.IGNORECASE)
    if m and not re.fullmatch(r"\d{8}", raw):
        return "batch", int(m.group(1))
    moment = None
    try:
        moment = datetime.fromisoformat(raw.replace(" ", "T", 1) if re.match(r"\d{4}-\d\d-\d\d \d", raw) else raw)
    except ValueError:
        try:
            t = time.fromisoformat(raw)
            moment = datetime.combine(datetime.now().date(), t)
        except ValueError:
            pass
    if moment is None:
        raise FieldslopeError(f"--since {text!r} is neither a date (2025-06-01), a time (08:30 or "
                              "2025-06-01 08:30) nor a batch number (12); give one of those.")
    if moment.tzinfo is None:
        moment = moment.astimezone()          # local time of this computer
    return "time", moment


def _stamp(text: str) -> datetime | None:
    """A stored ISO time (UTC) as an aware datetime; None when blank or unreadable."""
    try:
        d = datetime.fromisoformat(str(text))
    except ValueError:
        return None
    return d if d.tzinfo else d.replace(tzinfo=timezone.utc)


# -- remembering the last run ---------------------------------------------------------------------
def state_path() -> Path:
    from platformdirs import user_state_dir

    return Path(user_state_dir("fieldslope")) / STATE_FILE


def _study_key(root) -> str:
    return str(Path(root).resolve())


def last_run(root) -> dict | None:
    """This account's last run of ``changes`` on the study at ``root`` ({"time", "batch"}), or None."""
    try:
        data = json.loads(state_path().read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    entry = data.get(_study_key(root)) if isinstance(data, dict) else None
    return entry if isinstance(entry, dict) and "time" in entry else None


def remember_run(root, moment: datetime, batch: int) -> str:
    """Keep this run's moment for the next ``changes``; returns "" or one sentence on why it could not."""
    path = state_path()
    try:
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
            data = data if isinstance(data, dict) else {}
        except (OSError, ValueError):
            data = {}
        data[_study_key(root)] = {"time": moment.isoformat(timespec="seconds"), "batch": int(batch)}
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(path.name + ".part")
        tmp.write_text(json.dumps(data, indent=1), encoding="utf-8")
        os.replace(tmp, path)
    except OSError as exc:
        return (f"could not remember this run in {path} ({exc.strerror}); the next fieldslope changes "
                "without --since will start from the same point.")
    return ""


# -- what changed ----------------------------------------------------------------------------------
def resolve_since(when: str | None, batches, root) -> Since:
    if when is None:
        seen = last_run(root)
        if seen is None:
            return Since(None, 0, "the beginning of the study (you have not run fieldslope changes on it before)")
        moment = _stamp(seen["time"])
        if moment is None:
            return Since(None, 0, "the beginning of the study (the remembered time could not be read)")
        when_text = moment.astimezone().strftime("%Y-%m-%d %H:%M")
        batch = seen.get("batch")
        batch = batch if isinstance(batch, int) else _last_batch_by(batches, moment)
        return Since(moment, batch, f"your last run, {when_text}", inclusive=True)
    kind, value = parse_when(when)
    if kind == "batch":
        ids = [b.id for b in batches]
        if ids and value > max(ids):
            raise FieldslopeError(f"--since {when}: there is no batch {value} yet (the last is {max(ids)}).")
        received = next((b.received for b in batches if b.id == value), "")
        moment = _stamp(received) if received else None
        return Since(moment, value, f"batch {value}" + (f" ({str(received).replace('T', ' ')[:16]} UTC)"
                                                        if received else ""), inclusive=True)
    return Since(value, _last_batch_by(batches, value), value.strftime("%Y-%m-%d %H:%M %Z").strip())


def _last_batch_by(batches, moment: datetime) -> int:
    ids = [b.id for b in batches if (_stamp(b.received) or moment) <= moment]
    return max(ids, default=0)


def _after(stamp: str, since: Since) -> bool:
    if since.moment is None:
        return True
    d = _stamp(stamp)
    return d is not None and (d >= since.moment if since.inclusive else d > since.moment)


def gather(study, when: str | None, say=None) -> dict:
    """Everything ``changes`` reports, as plain data."""
    store = study.store
    batches = store.batches()
    since = resolve_since(when, batches, study.root)
    flags = store.flags(include_resolved=True)
    new_batches = [b for b in batches if b.id > since.batch]
    opened = [f for f in flags if f.batch_id > since.batch]
    resolved = [f for f in flags if f.status not in ("open",) and f.resolved_at and _after(f.resolved_at, since)]
    out = {
        "since": since.said, "since_time": since.moment.isoformat() if since.moment else None,
        "since_batch": since.batch,
        "batches": [{"id": b.id, "file": b.file_name, "operator": b.operator, "received": b.received,
                     "outcome": b.outcome, "rows": b.n_rows, "stored": b.n_stored,
                     "quarantined": b.n_quarantined} for b in new_batches],
        "flags_opened": [_flag(f) for f in opened],
        "flags_resolved": [_flag(f) for f in resolved if f.status != "set"],
        "corrections": [_flag(f) for f in resolved if f.status == "set"],
        "moved": moved_estimates(study, since.batch, say) if (new_batches or resolved) else [],
        "last_batch": max((b.id for b in batches), default=0),
    }
    return out


def _flag(f) -> dict:
    return {"id": f.id, "kind": f.kind, "individual": f.individual, "season": f.season, "field": f.field,
            "value": f.value, "status": f.status, "by": f.resolved_by, "at": f.resolved_at, "reason": f.reason,
            "new_value": f.new_value, "batch": f.batch_id, "message": f.message}


def moved_estimates(study, then_batch: int, say=None) -> list[dict]:
    """Estimates whose value now differs from the value after batch ``then_batch`` by more than that
    earlier value's OLS standard error, largest moves (in standard errors) first."""
    from fieldslope.tui.estimate_cache import kept

    if then_batch <= 0:
        return []
    # kept for the next run on the same record (tui.estimate_cache)
    return kept(study, {"what": "moved", "then": then_batch}, lambda: _moved(study, then_batch), say)


def _moved(study, then_batch: int) -> list[dict]:
    from fieldslope.tui.bridge import estimates_for_frame

    store, protocol = study.store, study.protocol
    now_frame = store.effective_frame()
    if now_frame.empty:
        return []
    then_frame = store.effective_frame(as_of_batch=then_batch)
    if then_frame.empty:
        return []
    now = estimates_for_frame(now_frame, protocol, bootstrap=0).table
    then = estimates_for_frame(then_frame, protocol, bootstrap=0).table
    key = ["season", "site", "fitness", "quantity", "term"]
    both = then.merge(now, on=key, suffixes=("_then", "_now"))
    out = []
    for r in both.itertuples(index=False):
        old, new, se = finite_or_none(r.estimate_then), finite_or_none(r.estimate_now), finite_or_none(r.se_then)
        if old is None or new is None or se is None or se <= MOVED_MIN_SE:
            continue
        if abs(new - old) > se:
            out.append({"season": r.season, "site": r.site, "fitness": r.fitness, "quantity": r.quantity,
                        "term": r.term, "then": old, "now": new, "se_then": se, "se_now": finite_or_none(r.se_now),
                        "moved_se": abs(new - old) / se})
    out.sort(key=lambda d: -d["moved_se"])
    return out


def text(info: dict) -> str:
    """The changes as lines of at most 80 columns; text from data goes through :func:`summary.shown`."""
    from fieldslope.common.names import flag_label as kind_label

    cut, wrap = fmt.cut, fmt.wrap
    lines = [wrap(f"changes since {info['since']}:", indent="")]
    if not (info["batches"] or info["flags_opened"] or info["flags_resolved"] or info["corrections"]):
        lines.append("  nothing new.")

    def listed(items, render):
        for item in items[:MAX_LISTED]:
            lines.append(render(item))
        if len(items) > MAX_LISTED:
            lines.append(f"    … and {len(items) - MAX_LISTED} more (fieldslope changes --format json lists all)")

    if info["batches"]:
        lines += ["", f"new batches ({len(info['batches'])}):"]
        listed(info["batches"], lambda b: wrap(
            f"#{b['id']} {shown(b['file'])}: {b['outcome']}, {b['stored']} of {b['rows']} rows stored"
            + (f", {b['quarantined']} quarantined" if b["quarantined"] else "")
            + f"; by {shown(b['operator'])}, {str(b['received']).replace('T', ' ')[:16]} UTC", indent="  "))
    if info["flags_opened"]:
        from collections import Counter

        counts = Counter(f["kind"] for f in info["flags_opened"])
        lines += ["", wrap(f"flags opened ({len(info['flags_opened'])}): "
                           + ", ".join(f"{kind_label(k)} {n}" for k, n in sorted(counts.items())), indent="")]
        listed(info["flags_opened"], lambda f: wrap(
            f"#{f['id']} {kind_label(f['kind'])}: {shown(f['individual'])} {shown(f['season'])} "
            f"{shown(f['field'])} {shown(f['value'])} (batch {f['batch']}; now {f['status']})", indent="  "))
    if info["flags_resolved"]:
        lines += ["", f"flags resolved ({len(info['flags_resolved'])}):"]
        listed(info["flags_resolved"], lambda f: wrap(
            f"#{f['id']} {kind_label(f['kind'])} {shown(f['individual'])} {shown(f['season'])} "
            f"{shown(f['field'])}: {_verb(f['status'])} by {shown(f['by'])}, {_when(f['at'])}; why: "
            f"{shown(f['reason'])}", indent="  "))
    if info["corrections"]:
        lines += ["", f"corrections ({len(info['corrections'])}):"]
        listed(info["corrections"], lambda f: wrap(
            f"#{f['id']} {shown(f['individual'])} {shown(f['season'])} {shown(f['field'])}: "
            f"{shown(f['value']) or 'blank'} → {shown(f['new_value'])} by {shown(f['by'])}, {_when(f['at'])}; "
            f"why: {shown(f['reason'])}", indent="  "))
    moved = info["moved"]
    if info["since_batch"] and (info["batches"] or info["flags_resolved"] or info["corrections"]):
        lines += ["", wrap(f"estimates that moved by more than their standard error since batch "
                           f"{info['since_batch']} ({len(moved)}; point estimates, OLS se):", indent="")]
        if moved:
            lines.append(f"  {'season':<6} {'site':<14} {'fitness':<9} {'quantity':<14} {'term':<12} "
                         f"{'then':>7} {'now':>7}")
        listed(moved, lambda m: cut(
            f"  {cut(shown(m['season']), 6):<6} {cut(shown(m['site']), 14):<14} {cut(shown(m['fitness']), 9):<9} "
            f"{cut(m['quantity'], 14):<14} {cut(shown(m['term']), 12):<12} {m['then']:>+7.3f} {m['now']:>+7.3f}",
            WIDTH))
        if moved:
            lines.append(wrap("(then: after the batch above; moved: |now − then| > the earlier se)", indent="  "))
    elif not info["since_batch"] and info["batches"]:
        lines += ["", "estimates: no earlier batch to compare with (see fieldslope estimate)."]
    return "\n".join(line.rstrip() for line in lines) + "\n"


def _verb(status: str) -> str:
    return {"keep": "kept", "exclude": "excluded", "superseded": "superseded"}.get(status, status)


def _when(stamp: str) -> str:
    return str(stamp).replace("T", " ")[:16]
