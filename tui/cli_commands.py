"""What each ``fieldslope`` subcommand does (the parser lives in ``tui.cli``)."""

from __future__ import annotations

import json
import shlex
import os
import sys
from dataclasses import replace
from pathlib import Path

from fieldslope.common.words import plural
from fieldslope.common.errors import FieldslopeError, SheetError
from fieldslope.common.names import ALL, Outcome
from fieldslope.schemas.study import Study, resolve_study_dir
from fieldslope.tui import cli_format as fmt


def run(args) -> int:
    command = args.command
    if command is None:
        return dashboard(args)
    return {"init": init, "check": check, "import": import_, "flags": flags, "resolve": resolve,
            "history": history, "batches": batches, "estimate": estimate, "demo": demo, "summary": summary,
            "changes": changes, "report": report}[command](args)


def _open(args, readonly: bool | None = False) -> Study:
    """The study of ``--study``; ``readonly=None`` for browsing (read-only when this account cannot write)."""
    study = Study.open(resolve_study_dir(args.study), readonly=readonly)
    if study.store.damaged:     # opened read-only after an unclean shutdown: say so once, then carry on reading
        fmt.say(f"fieldslope: {study.store.damaged}", file=sys.stderr)
    return study


def init(args) -> int:
    study = Study.create(args.dir, args.protocol)
    study.close()
    # the hint names the folder unless commands find this study without it (the default or $FIELDSLOPE_STUDY)
    found = Path(study.root).resolve() == resolve_study_dir(None).resolve()
    here = "" if found else f" --study {shlex.quote(str(study.root))}"
    fmt.say(f"created a study in {study.root}: drop batch files into {study.intake_dir} or use "
            f"fieldslope import FILE{here}")
    return 0


def _report(result) -> None:
    out, err = sys.stdout, sys.stderr
    for line in fmt.error_lines(result.errors):
        print(line, file=out)
    if result.earlier:
        fmt.say(result.earlier, file=out)
    for note in result.notes:     # how the file was read, columns not in the protocol, likely causes
        print(fmt.wrap(f"note: {note}", indent=""), file=out)
    if result.outcome == Outcome.REFUSED:
        fmt.say(f"fieldslope: {result.message}", file=err)
        if result.checked_only and result.flags:    # a check says the soft problems too, beside the errors
            print(fmt.flag_summary(result.flags, stored=False, refused=True), file=out)
            for line in fmt.flag_lines(result.flags):
                print(line, file=out)
        return
    fmt.say(result.message, file=out)
    if result.outcome != Outcome.DUPLICATE:
        print(fmt.flag_summary(result.flags, stored=not result.checked_only), file=out)
        if result.checked_only:
            for line in fmt.flag_lines(result.flags):
                print(line, file=out)


def _each_file(names, work):
    """Run ``work(name)`` for each file; a file that cannot be read is one line on stderr, not the end."""
    status = 0
    for name in names:
        try:
            result = work(name)
        except SheetError as exc:
            fmt.say(f"fieldslope: {exc}", file=sys.stderr)
            status = 1
            continue
        _report(result)
        status = max(status, 0 if result.ok else 1)
    return status


def check(args) -> int:
    with _open(args, readonly=None) as study:
        def one(name):
            result = study.store.check_file(name, accept_valid=args.accept_valid, recheck=True,
                                            follow_links=not study.in_drop_folder(name))
            if result.outcome in (Outcome.STORED, Outcome.PARTIAL):
                verb = "would store" if result.outcome == Outcome.STORED else "would store (quarantining the rest)"
                result = replace(result, message=f"{result.file_name}: {verb} {result.n_stored} of "
                                                 f"{plural(result.n_rows, 'row')}.")
            elif result.outcome == Outcome.REFUSED and result.errors:
                bad = len({e.row for e in result.errors})
                result = replace(result, message=f"{result.file_name}: {bad} of {plural(result.n_rows, 'row')} "
                                 f"{'has' if bad == 1 else 'have'} errors, so an import would store nothing; fix "
                                 "them, or import with --accept-valid to store the valid rows and quarantine the "
                                 "others.")
            return result
        return _each_file(args.files, one)


def import_(args) -> int:
    with _open(args) as study:
        def one(name):
            progress = fmt.Progress(f"importing {Path(name).name}")
            try:
                return study.store.import_file(name, operator=args.operator, accept_valid=args.accept_valid,
                                               progress=progress, follow_links=not study.in_drop_folder(name))
            finally:
                progress.done()
        return _each_file(args.files, one)


def flags(args) -> int:
    with _open(args, readonly=None) as study:
        fmt.print_flags(study.store.flags(include_resolved=args.all))
    return 0


def resolve(args) -> int:
    action = "keep" if args.keep else "exclude" if args.exclude else "set"
    with _open(args) as study:
        res = study.store.resolve_flag(args.flag, action, value=args.set, reason=args.reason,
                                       operator=args.operator, again=args.again)
    fmt.say(res.message)
    return 0


def batches(args) -> int:
    from fieldslope.tui import batch_list

    with _open(args, readonly=None) as study:
        found = study.store.batches()
    if args.day is not None:
        found = batch_list.on_day(found, args.day)
    fmt.print_batches(found, day=args.day)
    return 0


def history(args) -> int:
    with _open(args, readonly=None) as study:
        events = study.store.history_events(args.individual)
    if not events:
        raise FieldslopeError(f"{args.individual!r} is not on record; check the ID (IDs are compared as text, "
                              "leading zeros included).")
    fmt.print_history(events, args.individual)
    return 0


def estimate(args) -> int:
    from fieldslope.tui.bridge import estimates_for_frame
    from fieldslope.tui.estimate_cache import cached, table_options

    with _open(args, readonly=None) as study:
        protocol = study.protocol
        frame = study.store.effective_frame(without_open_outliers=args.without_open_outliers)
        h2 = study.store.heritability()
        if frame.empty:
            raise FieldslopeError("no records yet; take in batch files with fieldslope import FILE first.")
        _check_choice("season", args.season, sorted(frame[protocol.season_col].dropna().astype(str).unique()))
        if protocol.groups and args.site is not None and args.site != ALL:
            _check_choice("site", args.site, sorted(frame[protocol.groups[0]].dropna().astype(str).unique()))
        _check_choice("fitness", args.fitness, list(protocol.fitness))
        _check_narrowing(args.quantity, args.term, protocol.trait_names)
        progress = fmt.Progress("estimating")
        # --bootstrap 0 is the quick look: no animal models unless asked for (they take seconds to minutes)
        pedigree = not args.skip_pedigree and (args.bootstrap > 0 or args.pedigree)
        if not pedigree and not args.skip_pedigree and protocol.parent_cols:
            fmt.say("fieldslope: --bootstrap 0 leaves the animal models (pedigree h², r_g) out; add --pedigree "
                    "to fit them.", file=sys.stderr)
        options = table_options(bootstrap=args.bootstrap, seed=args.seed, season=args.season, site=args.site,
                                fitness=args.fitness, pedigree=pedigree, without_open_outliers=args.without_open_outliers,
                                random_effects=args.random_effects)
        try:
            # --season, --site and --fitness restrict the work (the rows asked for have the whole table's numbers)
            est = cached(study, options, lambda: estimates_for_frame(
                frame, protocol, bootstrap=args.bootstrap, seed=args.seed, h2=h2 or None, progress=progress,
                pedigree=pedigree, season=args.season, site=args.site, fitness=args.fitness,
                random_effects=args.random_effects), say=_say_trouble)
        finally:
            progress.done()
    table = est.table
    for col, value in (("season", args.season), ("site", args.site), ("fitness", args.fitness)):
        if value is not None:
            table = table[table[col].astype(str) == value]
    table = _narrowed(table, args.quantity, args.term, protocol.trait_names).reset_index(drop=True)
    notes = [n for n in est.notes if _note_matches(n, args)]
    if args.format == "csv":
        from fieldslope.schemas.export import frame_to_safe_csv
        text = frame_to_safe_csv(table)
    elif args.format == "json":
        text = json.dumps(_json_rows(table), indent=1, allow_nan=False) + "\n"
    else:
        from fieldslope.tui.estimate_text import estimates_text
        text = estimates_text(table, notes, {t: spec.unit for t, spec in protocol.traits.items()})
    if args.output:
        _write_atomic(Path(args.output), text)
        fmt.say(f"wrote {len(table)} estimates to {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0


def _say_trouble(sentence: str) -> None:
    fmt.say(f"fieldslope: {sentence}", file=sys.stderr)


def _note_matches(note, args) -> bool:
    if args.quantity and note.quantity not in ("", *args.quantity):
        return False
    return all(value is None or getattr(note, attr) in ("", value)
               for attr, value in (("season", args.season), ("site", args.site), ("fitness", args.fitness)))


def _check_narrowing(quantities: list[str] | None, terms: list[str] | None, traits: tuple[str, ...]) -> None:
    """``--quantity`` names a quantity of the estimates table; ``--term`` a trait or a term made of them
    (``a^2``, ``a:b``, ``m1``, ``m1:a``): said before any work is done."""
    import re

    from fieldslope.common.names import QUANTITIES
    from fieldslope.tui.estimate_text import term_traits

    for q in quantities or ():
        _check_choice("quantity", q, list(QUANTITIES))
    for t in terms or ():
        if not all(part in traits or re.fullmatch(r"m[0-9]+", part) for part in term_traits(t)):
            a, b = (traits + traits)[:2]
            raise FieldslopeError(f"there is no term {t!r} in these estimates; give a trait ({', '.join(traits)}) "
                                  f"or a term as the table writes it ({a}^2, {a}:{b}, m1, m1:{a}).")


def _narrowed(table, quantities: list[str] | None, terms: list[str] | None, traits: tuple[str, ...]):
    """The rows of the quantities and terms asked for (``--quantity``, ``--term``): a trait's name asks for
    every term about it (``a``, ``a^2``, ``a:b``, ``m1:a``), any other term only itself."""
    from fieldslope.tui.estimate_text import term_traits

    if quantities:
        table = table[table["quantity"].isin(quantities)]
    if terms:
        wanted = set(terms)
        keep = [str(t) in wanted or bool(term_traits(t) & wanted & set(traits)) for t in table["term"]]
        table = table[keep]
    return table


def _check_choice(what: str, value: str | None, choices: list[str]) -> None:
    if value is not None and value not in choices:
        raise FieldslopeError(f"there is no {what} {value!r} on record; choose one of {', '.join(choices)}.")


def _json_rows(table) -> list[dict]:
    import math

    out = []
    for rec in table.to_dict(orient="records"):
        row = {}
        for key, value in rec.items():
            if hasattr(value, "item"):
                value = value.item()
            if isinstance(value, float) and not math.isfinite(value):
                value = None
            row[key] = value
        out.append(row)
    return out


def _write_atomic(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".part")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        raise FieldslopeError(f"{path}: cannot write the output ({exc.strerror}); check the folder.") from None


def summary(args) -> int:
    from fieldslope.tui import summary as view

    with _open(args, readonly=True) as study:
        progress = fmt.Progress("summary")
        try:
            info = view.gather(study, fitness=args.fitness, bootstrap=args.bootstrap, seed=args.seed,
                               progress=progress, say=_say_trouble)
        finally:
            progress.done()
    sys.stdout.write(json.dumps(info, indent=1, allow_nan=False) + "\n" if args.format == "json"
                     else view.text(info))
    return 0


def changes(args) -> int:
    from datetime import datetime, timezone

    from fieldslope.tui import changes as view

    started = datetime.now(timezone.utc)
    with _open(args, readonly=True) as study:
        info = view.gather(study, args.since, say=_say_trouble)
        root = study.root
    sys.stdout.write(json.dumps(info, indent=1, allow_nan=False) + "\n" if args.format == "json"
                     else view.text(info))
    trouble = view.remember_run(root, started, info["last_batch"])
    if trouble:
        print(f"fieldslope: {trouble}", file=sys.stderr)
    return 0


def report(args) -> int:
    from fieldslope.tui import report as page

    options = page.Options(season=args.season, site=args.site, since=args.since, fitness=args.fitness,
                           bootstrap=args.bootstrap, seed=args.seed, png=bool(args.figures))
    with _open(args, readonly=True) as study:
        progress = fmt.Progress("report")
        try:
            result = page.build(study, options, progress=progress, say=_say_trouble)
        finally:
            progress.done()
    written = page.write(result, Path(args.output), Path(args.figures) if args.figures else None)
    print(f"wrote the report to {args.output}" + (f" and {written} pictures to {args.figures}" if args.figures else ""),
          file=sys.stderr)
    return 0


def demo(args) -> int:
    from fieldslope.tui.demo import run_demo

    dashboard = None
    if not args.headless:
        from fieldslope.tui.app import run_app as dashboard
    return int(run_demo(Path(args.study).expanduser() if args.study else None, args.headless,
                        dashboard=dashboard) or 0)


def dashboard(args) -> int:
    root = resolve_study_dir(args.study)
    from fieldslope.tui.app import run_app

    # Without a study here the app opens its start screen: create one from a protocol, open one, or the demo.
    run_app(root)
    return 0
