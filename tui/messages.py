"""Typed messages that carry worker results back to the dashboard's main thread."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from textual.message import Message

from fieldslope.tui.snapshot import Snapshot


@dataclass
class StudyReady(Message):
    """The study folder opened; ``readonly`` when the store could only be read."""

    protocol: Any
    readonly: bool
    warning: str = ""
    has_data: bool = True     # some batch went into the record (else the dashboard opens on Intake)


@dataclass
class StudyFailed(Message):
    """The study could not be opened at all (one sentence for the user)."""

    reason: str


@dataclass
class Polled(Message):
    """The store's change counter as read by the poller, and (every few polls) whether a write could start."""

    version: int
    writable: bool | None = None   # None: not probed this time, or this account cannot write anyway


@dataclass
class PointsReady(Message):
    """Point estimates (bootstrap 0) for a new store version or mode."""

    snapshot: Snapshot


@dataclass
class IntervalsProgress(Message):
    """How far the intervals of snapshot ``generation`` are (``done`` of ``total``); the latest wins."""

    done: int
    total: int
    generation: int

    def can_replace(self, message: Message) -> bool:
        """A newer progress message waiting in the queue supersedes this one (only the latest is shown)."""
        return isinstance(message, IntervalsProgress)


@dataclass
class IntervalsReady(Message):
    """The same snapshot with bootstrap intervals and permutation p-values filled in, from
    ``snapshot.resamples`` resamples; ``final`` when no further stage follows."""

    snapshot: Snapshot
    final: bool = True


@dataclass
class DemoNote(Message):
    """A line from the demo feed for the status line."""

    text: str


@dataclass
class StoreWritten(Message):
    """A screen stored something (batch, correction, h²): refresh without waiting for the poll."""

    what: str


@dataclass
class ReportWritten(Message):
    """The report and its pictures were written (by the report worker)."""

    page: str
    figures: str
    count: int
