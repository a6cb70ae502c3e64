"""The demo season: a fresh study of an invented beetle, fed one batch file at a time.

``run_demo(study_dir, headless)`` is what ``fieldslope demo`` calls. It creates
a demo study (in ``study_dir``, or a new ``demo-<time>`` folder under the user
data directory) from ``demo_season/protocol.toml`` and takes in the committed
batch files of ``demo_season/batches`` in arrival order, a few seconds apart,
the way a station manager would: a file refused whole stays refused (its
refusal is on record); a file refused for bad rows is taken again with valid
rows accepted, so the bad rows are quarantined.

Headless, it prints one line per batch, then the selection gradients and a
summary of the flags. With the dashboard, :func:`demo_feed` runs in the app's
worker thread on its own store connection while the screens refresh.

The pause between batches is ``delay`` seconds (default 3, or the
``FIELDSLOPE_DEMO_DELAY`` environment variable; 0 for tests).
"""

from __future__ import annotations

import os
import shutil
import sys
import textwrap
import threading
from collections import Counter
from dataclasses import dataclass
from datetime import datetime
from importlib import resources
from pathlib import Path
from typing import Callable, TextIO

from fieldslope.common.errors import FieldslopeError, DemoError
from fieldslope.common.names import ALL, Q, Outcome


def _demo_dir() -> Path:
    """The installed demo folder (importlib.resources; a wheel installs it on disk)."""
    root = resources.files("fieldslope.demo_season")
    return root if isinstance(root, Path) else Path(str(root))


DEMO_DIR = _demo_dir()
MARKER = ".fieldslope-demo"   # written into every demo study folder; only such folders are replaced
DEFAULT_DELAY = 3.0
DELAY_ENV = "FIELDSLOPE_DEMO_DELAY"
OPERATOR = "demo"
HEADLESS_BOOTSTRAP = 500
WIDTH = 80


@dataclass(frozen=True)
class DemoFiles:
    protocol: Path
    batches: tuple[Path, ...]


def demo_files(root: Path = DEMO_DIR) -> DemoFiles:
    """The demo protocol and its batch files in arrival order (their names sort that way)."""
    protocol = root / "protocol.toml"
    folder = root / "batches"
    batches = tuple(sorted(p for p in folder.glob("*") if p.suffix.lower() in (".csv", ".xlsx"))) \
        if folder.is_dir() else ()
    if not protocol.is_file() or not batches:
        raise DemoError(f"{root}: the demo season's files are missing; reinstall fieldslope or run "
                        "python -m fieldslope.demo_season.generate from a source checkout.")
    return DemoFiles(protocol, batches)


def demo_delay(delay: float | None = None) -> float:
    """Seconds between batches: the argument, else FIELDSLOPE_DEMO_DELAY, else 3."""
    if delay is not None:
        return max(0.0, float(delay))
    text = os.environ.get(DELAY_ENV, "").strip()
    if not text:
        return DEFAULT_DELAY
    try:
        return max(0.0, float(text))
    except ValueError:
        raise DemoError(f"{DELAY_ENV}={text!r} is not a number of seconds; set it to e.g. 0 or 3.") from None


def default_demo_dir() -> Path:
    from platformdirs import user_data_dir

    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    return Path(user_data_dir("fieldslope")) / f"demo-{stamp}"


def create_demo_study(study_dir: Path | None = None, files: DemoFiles | None = None) -> Path:
    """A fresh demo study folder. An earlier demo study there is replaced; any other content is refused."""
    from fieldslope.schemas.study import Study

    files = files or demo_files()
    target = Path(study_dir).expanduser() if study_dir is not None else default_demo_dir()
    if target.exists():
        if not target.is_dir():
            raise DemoError(f"{target}: is a file, not a folder; give a new or empty folder for the demo study.")
        if (target / MARKER).is_file():
            shutil.rmtree(target)
        elif any(target.iterdir()):
            raise DemoError(f"{target}: holds something that is not a demo study, which the demo will not "
                            "overwrite; give a new or empty folder with --study.")
    study = Study.create(target, files.protocol)
    _close(study)
    (target / MARKER).write_text("This folder is a fieldslope demo study; `fieldslope demo` may replace it.\n")
    return target


def _close(study) -> None:
    store = getattr(study, "store", None)
    close = getattr(store, "close", None) or getattr(study, "close", None)
    if close:
        close()


# -- taking in the batches --------------------------------------------------------------
@dataclass(frozen=True)
class BatchOutcome:
    """One batch as the station manager took it in: the first attempt and, if needed, the retake."""

    file_name: str
    first: object            # schemas.store_types.ImportResult
    retake: object | None    # taken again with valid rows accepted, when only some rows were bad

    @property
    def final(self):
        return self.retake or self.first

    def line(self) -> str:
        """A short account (may be longer than a terminal line; wrap it for display)."""
        first = self.first
        if self.retake is None:
            text = first.message or f"{first.file_name}: {first.outcome}."
        else:
            n_bad = len({e.row for e in first.errors})
            shown = first.errors[0].sentence() if first.errors else ""
            text = (f"{first.file_name}: refused, {n_bad} of {first.n_rows} rows bad ({shown}); "
                    f"taken again accepting valid rows: {self.retake.n_stored} stored, "
                    f"{self.retake.n_quarantined} quarantined.")
        counts = Counter(f.kind for f in self.final.flags)
        if counts:
            text += " Flags: " + ", ".join(f"{k.replace('_', ' ')} {n}" for k, n in sorted(counts.items())) + "."
        return text


    def short(self) -> str:
        """One status-bar phrase: the file's date and what became of it."""
        final = self.final
        if self.retake is not None:
            what = f"{final.n_stored} stored, {final.n_quarantined} quarantined"
        elif final.outcome == Outcome.REFUSED:
            what = "refused whole"
        elif final.outcome == Outcome.DUPLICATE:
            what = "already taken in"
        else:
            what = f"{final.n_stored} stored"
        n_flags = len(final.flags)
        parts = self.file_name.split("_")
        when = parts[1] if len(parts) > 1 else self.file_name
        return f"{when} {what}" + (f", {n_flags} flagged" if n_flags else "")


def take_in(store, path: Path, operator: str = OPERATOR) -> BatchOutcome:
    """Import one file; if rows were bad (not the whole file), import again with valid rows accepted."""
    data = path.read_bytes()
    first = store.import_bytes(path.name, data, operator=operator)
    retake = None
    if first.outcome == Outcome.REFUSED and first.errors:
        retake = store.import_bytes(path.name, data, operator=operator, accept_valid=True)
    return BatchOutcome(path.name, first, retake)


def feed_batches(study_dir: Path, *, delay: float = 0.0, say: Callable[[str], None] | None = None,
                 stop: threading.Event | None = None, files: DemoFiles | None = None,
                 terse: bool = False) -> list[BatchOutcome]:
    """Take in every demo batch through this thread's own store connection, ``delay`` seconds apart.

    ``say`` gets one line per batch (a short phrase when ``terse``); setting ``stop`` ends the
    feed before the next batch.
    """
    from fieldslope.schemas.study import Study

    files = files or demo_files()
    stop = stop or threading.Event()
    outcomes: list[BatchOutcome] = []
    study = Study.open(study_dir)
    try:
        total = len(files.batches)
        for i, path in enumerate(files.batches, 1):
            if i > 1 and delay > 0 and stop.wait(delay):
                break
            if stop.is_set():
                break
            outcome = take_in(study.store, path)
            outcomes.append(outcome)
            if say:
                say(f"demo {i}/{total}: {outcome.short()}" if terse else f"[{i}/{total}] {outcome.line()}")
    finally:
        _close(study)
    return outcomes


def demo_feed(study_dir: Path, delay: float | None = None) -> Callable[[threading.Event, Callable[[str], None]], None]:
    """A feed for the dashboard (``FieldslopeApp(demo_feed=...)``): runs in its worker thread."""
    pause = demo_delay(delay)

    def feed(stop: threading.Event, say: Callable[[str], None]) -> None:
        feed_batches(study_dir, delay=pause, say=say, stop=stop, terse=True)
        if not stop.is_set():
            say("demo season all in: see Flags (2) and Selection (3)")

    return feed


# -- headless report ------------------------------------------------------------------------
def _wrap(text: str, indent: str = "    ") -> str:
    return textwrap.fill(text, WIDTH, subsequent_indent=indent, break_long_words=False, break_on_hyphens=False)


def gradient_lines(table, fitness: str, traits: tuple[str, ...]) -> list[str]:
    """Linear gradients per season and site (pooled site = all), 80 columns: β ±se, * if the 95 % CI excludes 0."""
    rows = table[(table["quantity"] == Q.GRADIENT) & (table["fitness"] == fitness)]
    head = f"{'season':<7}{'site':<17}{'n':>5}" + "".join(f"{t[:14]:>16}" for t in traits)
    out = [head]
    for (season, site), block in rows.groupby(["season", "site"], sort=False):
        by_term = {r.term: r for r in block.itertuples()}
        cells = []
        n = None
        for t in traits:
            r = by_term.get(t)
            if r is None:
                cells.append(f"{'–':>16}")
                continue
            n = r.n
            star = "*" if (r.ci_low == r.ci_low and (r.ci_low > 0 or r.ci_high < 0)) else " "
            se = f"±{r.se:.3f}" if r.se == r.se else ""
            cells.append(f"{r.estimate:+.3f}{se:>7}{star}".rjust(16))
        out.append(f"{str(season):<7}{str(site)[:16]:<17}{'' if n is None else int(n):>5}" + "".join(cells))
    return out


def term_lines(table, quantity: str, fitness: str | None, label: str) -> list[str]:
    rows = table[(table["quantity"] == quantity) & (table["site"] == ALL)]
    if fitness is not None:
        rows = rows[rows["fitness"] == fitness]
    out = []
    for r in rows.itertuples():
        if r.ci_low == r.ci_low:
            spread = f"95 % CI {r.ci_low:+.3f} to {r.ci_high:+.3f}"
        else:
            spread = f"se {r.se:.3f}" if r.se == r.se else ""
        season = "" if r.season == ALL else f" {r.season}"
        out.append(_wrap(f"  {label} {r.term}{season}: {r.estimate:+.3f}  {spread}  n={r.n}"))
    return out


def flag_summary(flags) -> list[str]:
    """Open flags by kind, with one example sentence each."""
    if not flags:
        return ["No flags."]
    counts = Counter(f.kind for f in flags)
    out = [_wrap(f"{len(flags)} open flags: "
                 + ", ".join(f"{k.replace('_', ' ')} {n}" for k, n in sorted(counts.items())) + ". Examples:", "")]
    seen = set()
    for f in flags:
        if f.kind in seen:
            continue
        seen.add(f.kind)
        out.append(_wrap(f"  - {f.message}"))
    return out


def report(study_dir: Path, out: TextIO, *, bootstrap: int = HEADLESS_BOOTSTRAP, seed: int | None = None) -> None:
    """Print the estimates and the flags of the demo study."""
    from fieldslope.schemas.study import Study
    from fieldslope.tui.bridge import estimates_for_frame

    study = Study.open(study_dir)
    try:
        protocol = study.protocol
        frame = study.store.effective_frame()
        flags = study.store.flags()
        batches = study.store.batches()
    finally:
        _close(study)
    est = estimates_for_frame(frame, protocol, bootstrap=bootstrap, seed=seed)
    table = est.table
    traits = protocol.trait_names
    total = next(iter(protocol.totals), protocol.component_names[0])
    print("", file=out)
    print(_wrap(f"Selection gradients β on relative {total} fitness (w per sd, ± OLS se; "
                f"* = 95 % bootstrap interval of {bootstrap} resamples excludes 0; site all = pooled):",
                ""), file=out)
    for line in gradient_lines(table, total, traits):
        print(line, file=out)
    lines = term_lines(table, Q.CORRELATIONAL, total, "γ")
    if lines:
        print("Correlational gradients (pooled over sites):", file=out)
        for line in lines:
            print(line, file=out)
    lines = term_lines(table, Q.HERITABILITY, None, "h²")
    if lines:
        print("Heritability (offspring on midparent):", file=out)
        for line in lines:
            print(line, file=out)
    refused = [b for b in batches if b.outcome == Outcome.REFUSED]
    print("", file=out)
    print(f"{len(batches)} batch records, {len(refused)} refusals on record.", file=out)
    for line in flag_summary(flags):
        print(line, file=out)
    print(_wrap(f"The true values these estimates should recover are in {DEMO_DIR / 'README.md'}. "
                f"The study is in {study_dir}; explore it with fieldslope --study {study_dir}.", ""), file=out)


def run_demo(study_dir: Path | None, headless: bool, *, delay: float | None = None,
             out: TextIO | None = None, bootstrap: int = HEADLESS_BOOTSTRAP,
             dashboard: Callable[..., None] | None = None) -> int:
    """``fieldslope demo``: 0 on success; a problem is one sentence on stderr and exit status 1.

    Without ``headless``, ``dashboard(study_dir, demo_feed=feed)`` opens the dashboard on the
    new demo study (the command line passes the app's runner, so this module needs no app)."""
    out = out or sys.stdout
    try:
        pause = demo_delay(delay)
        files = demo_files()
        target = create_demo_study(study_dir, files)
        if not headless and dashboard is not None:
            dashboard(target, demo_feed=demo_feed(target, pause))
            return 0
        print(_wrap(f"fieldslope demo: an invented beetle at three invented sites, 2023-2025; "
                    f"{len(files.batches)} batch files arriving {pause:g} s apart into {target}", ""), file=out)

        def say(text: str) -> None:
            print(_wrap(text), file=out, flush=True)

        feed_batches(target, delay=pause, say=say, files=files)
        report(target, out, bootstrap=bootstrap)
    except FieldslopeError as exc:
        print(f"fieldslope demo: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("fieldslope demo: stopped; the batches taken in so far stay in the demo study.", file=sys.stderr)
        return 130
    return 0
