"""The dashboard's live refresh: poll the store → point estimates → intervals, as one object.

:class:`RefreshPipeline` owns the whole loop and its state (the generation counter, the last
store version seen, the poll connection); the app only holds the results, as reactive attributes
the status line and the screens watch (``snapshot``, ``updating``, ``progress``, ``error``,
``locked``):

1. ``poll`` reads ``PRAGMA data_version`` on one long-lived connection (in a single-thread
   executor, since the counter only means something on the same connection), and every few polls
   probes whether a write could start (read-only while another program holds the store).
2. When the counter moved (or on demand: ``start_points``), ``points`` reads the store once and
   computes point estimates (bootstrap 0); the next poll is scheduled only after they are shown.
3. ``intervals`` then computes bootstrap intervals and permutation p-values in stages: first from
   ``first_stage(bootstrap)`` resamples (the same numbers a run with that many would give, since
   every chunk of resamples has its own seed), then from all of them. Each stage replaces the
   snapshot; progress messages replace each other in the app's queue (latest wins).

Each step is a ``@work(thread=True, exclusive=True, exit_on_error=False)`` worker returning a
typed message (``tui.messages``). The pipeline is a :class:`~textual.dom.DOMNode` only so that it can
run workers; it is never mounted, and every message it posts (worker results and worker state
changes alike) goes to the app's queue, where the app hands its own back to :meth:`receive`
and turns a failed worker into a sentence (``FieldslopeApp.worker_failure``).
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Callable

from textual import work
from textual.app import App
from textual.dom import DOMNode
from textual.message import Message
from textual.worker import get_current_worker

from fieldslope.tui.messages import IntervalsProgress, IntervalsReady, Polled, PointsReady
from fieldslope.tui.snapshot import Snapshot

#: the message types the pipeline's workers post (the app hands them back to ``receive``)
PIPELINE_MESSAGES = (Polled, PointsReady, IntervalsProgress, IntervalsReady)
#: the worker groups of the pipeline
GROUPS = ("poll", "points", "intervals")
# below this many resamples the intervals come in one stage (a first stage would save little)
STAGED_FROM = 1000
# resamples of the first stage: one chunk of the resampler's streams (analysis.resample.CHUNK)
FIRST_STAGE = 200


def interval_stages(bootstrap: int) -> tuple[int, ...]:
    """The resample counts whose intervals are shown in turn: (200, B) from B = 1000 on, else (B,)."""
    if bootstrap >= STAGED_FROM:
        return (FIRST_STAGE, bootstrap)
    return (bootstrap,) if bootstrap > 0 else ()


class Cancelled(Exception):
    """Raised inside an intervals worker's progress callback when newer data made its work moot."""


class RefreshPipeline(DOMNode):
    """Poll → point estimates → intervals for the app's study; see the module docstring.

    ``app`` is the dashboard (``tui.app.FieldslopeApp``): the pipeline sets its reactive ``snapshot``,
    ``updating``, ``progress`` and ``error``, reads ``readonly``, ``locked`` and ``sensitivity``, and
    calls its ``set_locked``, ``set_timer`` and ``post_message``."""

    PROBE_EVERY = 4        # probe the write lock on every 4th poll (and on every poll while locked)

    def __init__(self, app: App, study_dir: Path, *, bootstrap: int, seed: int | None,
                 poll_interval: float, clock: Callable[[], str]) -> None:
        super().__init__(name="refresh-pipeline")
        self.owner = app
        self.study_dir = Path(study_dir)
        self.bootstrap = bootstrap
        self.seed = seed
        self.poll_interval = poll_interval
        self.clock = clock
        self.generation = 0                # bumped for every new point snapshot asked for
        self.version_seen: int | None = None
        self.stop = threading.Event()      # set on exit: no further polls, running work ends early
        self.poller = None                 # the long-lived poll connection (tui.loading.Poller)
        self._executor = None
        self._polls = 0
        self._pending = False              # a poll is scheduled
        self._poll_failed = False

    # -- plumbing: messages go to the app's queue ---------------------------------------
    def post_message(self, message: Message) -> bool:
        """Everything the pipeline's workers post (results and worker state changes) goes to the app."""
        return self.owner.post_message(message)

    def receive(self, msg: Message) -> None:
        """A pipeline message, handed back by the app on the main thread."""
        if isinstance(msg, Polled):
            self._polled(msg)
        elif isinstance(msg, PointsReady):
            self._points_ready(msg)
        elif isinstance(msg, IntervalsProgress):
            self._intervals_progress(msg)
        elif isinstance(msg, IntervalsReady):
            self._intervals_ready(msg)

    def close(self) -> None:
        """Stop polling and close the poll connection (on the thread that opened it)."""
        self.stop.set()
        if self._executor is not None:
            if self.poller is not None:
                self._executor.submit(self.poller.close)
            self._executor.shutdown(wait=False)

    # -- 1. poll -------------------------------------------------------------------------
    def start(self) -> None:
        """Look at the store at once (a fresh study, or after the study was opened)."""
        self.version_seen = None
        self.schedule_poll(0)

    def schedule_poll(self, delay: float | None = None) -> None:
        """Ask for the next look at the change counter (only one look is ever pending)."""
        if self.stop.is_set() or self._pending:
            return
        self._pending = True
        self.owner.set_timer(max(0.01, self.poll_interval if delay is None else delay), self._poll_now)

    def _poll_now(self) -> None:
        self._pending = False
        if not self.stop.is_set():
            self.poll(self.owner.readonly, self.owner.locked)

    @work(thread=True, exclusive=True, exit_on_error=False, group="poll")
    def poll(self, readonly: bool, locked: bool) -> None:
        """Read ``PRAGMA data_version`` through the one long-lived connection (its own thread)."""
        from concurrent.futures import ThreadPoolExecutor

        from fieldslope.tui.loading import Poller

        if self._executor is None:
            self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="fieldslope-poll")
        if self.poller is None or self.poller.study_dir != self.study_dir:
            self.poller = self._executor.submit(Poller, self.study_dir).result()
        version = self._executor.submit(self.poller.version).result()
        writable = None
        if not readonly and (self._polls % self.PROBE_EVERY == 0 or locked):
            writable = self._executor.submit(self.poller.writable).result()
        self._polls += 1
        self.post_message(Polled(version, writable))

    def _polled(self, msg: Polled) -> None:
        app = self.owner
        if msg.writable is not None:
            app.set_locked(not msg.writable)
        if self._poll_failed:                  # the store answers again: the poll's error is over
            self._poll_failed = False
            app.error = ""
        if msg.version != self.version_seen:
            app.timings["poll_saw_change"] = time.perf_counter()
            self.version_seen = msg.version
            self.start_points()                # the next poll is scheduled once the figures are shown
        else:
            self.schedule_poll()

    # -- 2. point estimates --------------------------------------------------------------
    def start_points(self) -> None:
        """Recompute the point estimates now (new data, the outlier toggle, or a refresh key)."""
        self.generation += 1
        self.owner.progress = ""
        self.owner.updating = "updating…"
        self.points(self.generation, self.version_seen or 0, self.owner.sensitivity, self.owner.readonly)

    @work(thread=True, exclusive=True, exit_on_error=False, group="points")
    def points(self, generation: int, version: int, sensitivity: bool, readonly: bool) -> None:
        """Read the store once and compute point estimates (bootstrap 0)."""
        from fieldslope.tui.loading import load_snapshot

        snap = load_snapshot(self.study_dir, generation=generation, version=version, sensitivity=sensitivity,
                             refreshed_at=self.clock(), readonly=readonly)
        if not get_current_worker().is_cancelled:
            self.post_message(PointsReady(snap))

    def _points_ready(self, msg: PointsReady) -> None:
        if msg.snapshot.generation != self.generation:
            return                             # newer data was asked for meanwhile
        app = self.owner
        app.error = ""
        app.snapshot = msg.snapshot
        app.timings["points_shown"] = time.perf_counter()
        self.schedule_poll()
        stages = interval_stages(self.bootstrap)
        if stages:
            app.progress = "intervals 0%"
            app.updating = "intervals…"
            self.intervals(msg.snapshot, stages)
        else:
            app.updating = ""

    # -- 3. intervals, in stages ---------------------------------------------------------
    @work(thread=True, exclusive=True, exit_on_error=False, group="intervals")
    def intervals(self, snap: Snapshot, stages: tuple[int, ...]) -> None:
        """Bootstrap intervals and permutation p-values from each stage's resamples in turn; progress
        counts the work of all stages (resamples and permutations)."""
        from fieldslope.tui.loading import add_intervals

        worker = get_current_worker()
        grand = sum(stages)
        before = 0

        def progress(done: int, total: int, *_: object) -> None:
            if worker.is_cancelled or self.stop.is_set() or self.generation != snap.generation:
                raise Cancelled()
            share = done / total if total else 1.0
            self.post_message(IntervalsProgress(round((before + share * stage) * 1000), grand * 1000,
                                                snap.generation))

        for stage in stages:
            try:
                staged = add_intervals(snap, bootstrap=stage, seed=self.seed, progress=progress,
                                       refreshed_at=self.clock())
            except Cancelled:
                return
            if worker.is_cancelled:
                return
            self.post_message(IntervalsReady(staged, final=stage == stages[-1]))
            before += stage

    def _intervals_progress(self, msg: IntervalsProgress) -> None:
        if msg.generation == self.generation and msg.total:
            self.owner.progress = f"intervals {100 * msg.done // msg.total}%"

    def _intervals_ready(self, msg: IntervalsReady) -> None:
        if msg.snapshot.generation != self.generation:
            return
        app = self.owner
        app.snapshot = msg.snapshot
        if msg.final:
            app.progress = ""
            app.updating = ""

    # -- failures ------------------------------------------------------------------------
    def worker_failed(self, group: str) -> None:
        """After one of the pipeline's workers failed (the app has shown the sentence): carry on."""
        app = self.owner
        if group in ("points", "intervals"):
            app.progress = ""
            app.updating = ""
            if group == "points":
                self.schedule_poll()
        elif group == "poll":
            # try again after a pause, so a locked or vanished store does not end live refresh
            self.poller = None
            self._poll_failed = True
            self.schedule_poll(2.0)
