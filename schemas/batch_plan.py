"""A batch read and checked against the protocol, before the store looks at it (no connection needed)."""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Callable

from fieldslope.common.errors import SheetError
from fieldslope.schemas.protocol import Protocol
from fieldslope.schemas.records import CheckReport

Progress = Callable[[int, int, str], None]


def now() -> str:
    """The current time in UTC, to the second, as the store records it."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


class BatchPlan:
    """A batch read and checked against the protocol (no store needed)."""

    def __init__(self, name, data, sha, report: CheckReport | None, refusal: str = ""):
        self.name, self.data, self.sha, self.report, self.refusal = name, data, sha, report, refusal

    @property
    def notes(self) -> tuple[str, ...]:
        """What the reader says about how the file was read (further worksheets left out, a guessed
        encoding), then what the checks say about the whole sheet (columns not in the protocol, likely
        causes of odd values): shown with the check and kept with the batch."""
        if self.report is None:
            return ()
        return (*self.report.sheet.notes, *self.report.notes)

    @classmethod
    def make(cls, protocol: Protocol, name: str, data: bytes, progress: Progress) -> "BatchPlan":
        from fieldslope.schemas.readers import read_sheet
        from fieldslope.schemas.validate import check_sheet
        import hashlib

        sha = hashlib.sha256(data).hexdigest()
        progress(0, 1, "reading")
        try:
            report = check_sheet(protocol, read_sheet(name, data))
        except SheetError as exc:
            return cls(name, data, sha, None, str(exc))
        progress(0, 1, "checking")
        return cls(name, data, sha, report)
