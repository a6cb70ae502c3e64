"""Resolving flags: keep or exclude the flagged value, or set (correct) it; the old value stays on record.

Flags of quarantined rows go to ``store_quarantine.QuarantineFix``. Every resolution is a new
``resolutions`` row (who, when, old, new, why); nothing is overwritten."""

from __future__ import annotations

import math
import sqlite3

from fieldslope.common.names import ID_KINDS, Kind
from fieldslope.schemas import effective as eff
from fieldslope.schemas import store_copies as copies
from fieldslope.schemas.batch_plan import now
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.store_types import show
from fieldslope.schemas.store_queries import last_batch_id
from fieldslope.schemas.store_quarantine import INSERT_RESOLUTION, QuarantineFix
from fieldslope.schemas.store_types import RecordError, Resolution, StoredFlag

ACTIONS = ("keep", "exclude", "set")


def checked_request(action: str, value: str | None, reason: str) -> str:
    """Refuse an incomplete request with one sentence; return the reason as stored (trimmed)."""
    if action not in ACTIONS:
        raise RecordError(f"unknown action {action!r}; use keep, exclude or set.")
    if not reason or not reason.strip():
        raise RecordError("a reason is required for every resolution; say why in a few words (--reason).")
    if action == "set" and (value is None or not str(value).strip()):
        raise RecordError("--set needs the right value; give it after --set.")
    return reason.strip()


class FlagResolver:
    """Records resolutions of flags on stored values (and hands quarantined rows to ``quarantine``)."""

    def __init__(self, protocol: Protocol, fields: dict[str, eff.FieldCol], quarantine: QuarantineFix):
        self.protocol, self.fields, self.quarantine = protocol, fields, quarantine
        self.mover = copies.RowMove(protocol, fields, quarantine.evaluate)

    def resolve(self, conn: sqlite3.Connection, flag_id: int, action: str, value: str | None, reason: str,
                people: tuple[str, str], again: bool = False) -> Resolution:
        """Keep, exclude or set; ``people`` is (operator, login) as ``operator.who`` gives them. A flag
        decided before is decided again only with ``again`` (the earlier decision stays in the history)."""
        flag = copies.flag_row(conn, flag_id)
        if flag is None:
            raise RecordError(f"there is no flag {flag_id}; list the flags with fieldslope flags --all.")
        ind, season, field, flagged = flag.individual, flag.season, flag.field, flag.value
        quarantine_id = conn.execute("SELECT quarantine_id FROM flags WHERE id = ?", (flag_id,)).fetchone()[0]
        later = conn.execute("SELECT batch_id FROM supersessions WHERE flag_id = ? ORDER BY id DESC LIMIT 1",
                             (flag_id,)).fetchone()
        if later and not conn.execute("SELECT 1 FROM resolutions WHERE flag_id = ?", (flag_id,)).fetchone():
            raise RecordError(f"flag {flag_id} is superseded: batch {later[0]} gave a newer {field or 'value'} for "
                              f"{ind} in {season}, so there is nothing to resolve; see fieldslope history {ind}.")
        if quarantine_id is not None:   # a row that joined or was left out says so, whatever ``again``
            self.quarantine.refuse_if_closed(conn, quarantine_id, action)
        self._refuse_second_decision(conn, flag, again)
        if quarantine_id is not None:
            return self.quarantine.resolve(conn, flag_id, quarantine_id, field, flagged, action, value,
                                           reason, people)
        after = last_batch_id(conn)
        if action == "set" and flag.kind in ID_KINDS:
            new_id, also = self.mover.move(conn, flag, str(value), reason, people, after)
            joined = self.quarantine.rejoin(conn, people, after, f"{new_id} is on record now (flag {flag_id})")
            tail = "".join(f"; {s}" for s in (also, *joined) if s)
            return Resolution(flag_id, "set", old=ind, new=new_id, joined=bool(joined),
                              message=f"flag {flag_id}: row {flag.row} of batch {flag.batch_id} moved from ID "
                                      f"{ind} to {new_id} in {season}{tail}.")
        if action != "set":
            conn.execute(INSERT_RESOLUTION, (flag_id, action, flagged, None, reason, *people, now(), after))
            also = copies.settle(conn, flag, action, reason, people, after)
            if flag.kind == Kind.DUPLICATE_ID:
                what = f"row {flag.row} ({ind} {season}) " + ("kept as the record" if action == "keep"
                                                                else "left out of the estimates")
            else:
                what = f"{ind} {season} {field or 'record'} " + ("kept" if action == "keep"
                                                               else "left out of the estimates")
            return Resolution(flag_id, action, old=flagged,
                              message=f"flag {flag_id}: {what}" + (f"; {also}" if also else "") + ".")
        return self._set(conn, flag_id, ind, season, field, value, reason, people, after)

    @staticmethod
    def _refuse_second_decision(conn: sqlite3.Connection, flag: StoredFlag, again: bool) -> None:
        """A decided flag is decided again only on request, and never once its row moved to another ID."""
        last = conn.execute("SELECT action, new, operator, created, reason FROM resolutions WHERE flag_id = ? "
                            "ORDER BY id DESC LIMIT 1", (flag.id,)).fetchone()
        if last is None:
            return
        moved_to = copies.moved(conn, flag.record_id)
        if moved_to:
            raise RecordError(f"flag {flag.id}: row {flag.row} of batch {flag.batch_id} was moved to ID {moved_to}; "
                              f"decide on its values under that ID (fieldslope history {moved_to}).")
        if not again:
            action, new, operator, created, reason = last
            verb = {"keep": "kept", "exclude": "excluded", "set": f"set to {new}"}.get(action, action)
            raise RecordError(f"flag {flag.id} was already decided ({verb} by {operator} at {created}: {reason}); "
                              "to decide it again, add --again (the earlier decision stays in the history).")

    def _set(self, conn: sqlite3.Connection, flag_id: int, ind: str, season: str, field: str, value: str | None,
             reason: str, people: tuple[str, str], after: int) -> Resolution:
        if field in ("", self.protocol.id_col, self.protocol.season_col) or field not in self.fields:
            raise RecordError(f"flag {flag_id} concerns the whole record of {ind} in {season}; resolve it with "
                              "--keep or --exclude.")
        new = self.typed_text(field, str(value))
        current = eff.latest(conn, self.protocol, self.fields, seasons=[season])
        old = ""
        if (ind, season) in current.index:
            old = show(current.at[(ind, season), field])
        # The corrected value answers every other open flag on the same value (e.g. out of range and
        # outlier on one slip): each gets its own audit row naming this correction.
        siblings = [r[0] for r in conn.execute(
            "SELECT f.id FROM flags f WHERE f.individual = ? AND f.season = ? AND f.field = ? AND f.id <> ? "
            "AND f.quarantine_id IS NULL "
            "AND NOT EXISTS (SELECT 1 FROM resolutions r WHERE r.flag_id = f.id) "
            "AND NOT EXISTS (SELECT 1 FROM supersessions s WHERE s.flag_id = f.id)",
            (ind, season, field, flag_id))]
        stamp = now()
        conn.executemany(
            INSERT_RESOLUTION,
            [(flag_id, "set", old, new, reason, *people, stamp, after)]
            + [(sid, "set", old, new, f"{reason} (corrected under flag {flag_id})", *people, stamp, after)
               for sid in siblings])
        return Resolution(flag_id, "set", old=old, new=new,
                          message=f"flag {flag_id}: {ind} {season} {field} set from {old or 'blank'} to {new}.")

    def typed_text(self, field: str, text: str) -> str:
        """Check a value typed for ``field``; return it as stored, or raise RecordError saying why."""
        p, text = self.protocol, text.strip()
        if self.fields[field].kind == "text":
            allowed = p.allowed.get(field)
            if allowed and text not in allowed:
                raise RecordError(f"{text!r} is not an allowed {field}; use one of {', '.join(allowed)}.")
            return text
        try:
            number = eff.parse_number(text)
        except ValueError:
            raise RecordError(f"{text!r} is not a number; give {field} as a number such as 12.5.") from None
        if not math.isfinite(number):
            raise RecordError(f"{text!r} is not a finite number; give {field} as a number such as 12.5.")
        spec = p.fitness.get(field)
        if spec is not None and spec.kind == "binary" and number not in (0.0, 1.0):
            raise RecordError(f"{field} is binary; give 0 or 1, not {text!r}.")
        if spec is not None and spec.kind == "count" and (number < 0 or number != int(number)):
            raise RecordError(f"{field} is a count; give a whole number of 0 or more, not {text!r}.")
        return show(number)
