"""The ``fieldslope`` command line (the dashboard is started from here too).

Exit status: 0 done, 1 a refused batch or a failed operation, 2 a usage error;
every failure is one line on stderr (``--debug`` adds the traceback).
"""

from __future__ import annotations

import argparse
import os
import sys

# One BLAS thread, set before numpy is first imported: the estimates run with one thread anyway (many small
# products, threadpoolctl), and an idle thread pool costs every command start-up time (about 0.08 s of
# `estimate --bootstrap 0` at 10,000 individuals). A user's own setting is kept.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

from fieldslope.common.errors import FieldslopeError
from fieldslope.tui.safe_text import escape_controls


def _version() -> str:
    """The installed distribution's version (importlib.metadata), or a plain word from a bare checkout."""
    from importlib import metadata     # read only for --version: importing it costs every command 0.1 s

    try:
        return metadata.version("fieldslope")
    except metadata.PackageNotFoundError:
        return "(not installed)"


class _VersionAction(argparse.Action):
    """``--version``: the version is looked up only when asked for."""

    def __init__(self, option_strings, dest=argparse.SUPPRESS, default=argparse.SUPPRESS, help=None):
        super().__init__(option_strings=option_strings, dest=dest, default=default, nargs=0,
                         help=help or "show the version and exit")

    def __call__(self, parser, namespace, values, option_string=None):
        sys.stdout.write(f"fieldslope {_version()}\n")
        parser.exit()


class UsageError(Exception):
    """Bad arguments: exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line, exit status 2 (argparse would print the usage block)
        raise UsageError(f"{message}; see fieldslope {self.prog.split(' ', 1)[1] + ' ' if ' ' in self.prog else ''}"
                         "--help")


def _common(parser: argparse.ArgumentParser, top: bool) -> None:
    default = None if top else argparse.SUPPRESS
    parser.add_argument("--study", metavar="DIR", default=default,
                        help="the study folder (default: $FIELDSLOPE_STUDY, else the user data folder)")
    parser.add_argument("--debug", action="store_true", default=False if top else argparse.SUPPRESS,
                        help="show the full traceback of a failure")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="fieldslope", description="Measure selection during a field season. "
                     "With no command, opens the dashboard.")
    parser.add_argument("--version", action=_VersionAction)
    _common(parser, top=True)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    def command(name: str, text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(name, help=text, description=text)
        _common(p, top=False)
        return p

    p = command("init", "create a study folder from a protocol file")
    p.add_argument("dir", metavar="DIR")
    p.add_argument("--protocol", metavar="FILE", required=True)

    p = command("check", "check batch files against the protocol and the record; store nothing")
    p.add_argument("files", metavar="FILE", nargs="+")
    p.add_argument("--accept-valid", action="store_true", help="report as an import with --accept-valid would")

    p = command("import", "take in batch files")
    p.add_argument("files", metavar="FILE", nargs="+")
    p.add_argument("--accept-valid", action="store_true",
                   help="store the valid rows and quarantine rows with errors (default: refuse the whole batch)")
    p.add_argument("--operator", metavar="NAME", type=_name, help="who takes the batch in (default: your login name)")

    p = command("flags", "list open flags")
    p.add_argument("--all", action="store_true", help="resolved flags too")

    p = command("resolve", "keep, exclude or correct the value behind a flag")
    p.add_argument("flag", metavar="FLAG", type=_flag_id)
    how = p.add_mutually_exclusive_group(required=True)
    how.add_argument("--keep", action="store_true",
                     help="the value is right (a duplicate ID: this row is the record, its other copies are left out)")
    how.add_argument("--exclude", action="store_true", help="leave the value (or row) out of the estimates")
    how.add_argument("--set", metavar="VALUE", help="replace the value (the old one stays on record); for a "
                     "duplicate or mangled ID, the right ID: the row moves to it")
    p.add_argument("--reason", metavar="TEXT", required=True, help="why (kept with the change)")
    p.add_argument("--again", action="store_true",
                   help="decide a flag that was decided before (the earlier decision stays in the history)")
    p.add_argument("--operator", metavar="NAME", type=_name, help="who resolves it (default: your login name)")

    p = command("batches", "list the batches received: outcome, rows, operator, time and file")
    p.add_argument("--day", metavar="DAY", type=_day, help="only those received that day: today, yesterday or "
                   "YYYY-MM-DD (your computer's calendar)")

    p = command("history", "one individual's values, flags and changes")
    p.add_argument("individual", metavar="ID")

    p = command("estimate", "write the estimates table")
    p.add_argument("--format", choices=("table", "csv", "json"), default="table")
    p.add_argument("--bootstrap", metavar="N", type=_count, default=2000,
                   help="bootstrap resamples and permutations (0 = point estimates only; default 2000)")
    p.add_argument("--seed", metavar="N", type=_count, default=None, help="random seed, 0 or more (default: fixed)")
    p.add_argument("--season", metavar="S", help="only this season's rows")
    p.add_argument("--site", metavar="S", help="only this site's rows (or 'all' for pooled rows)")
    p.add_argument("--fitness", metavar="NAME", help="only this fitness component or total")
    p.add_argument("--quantity", metavar="NAME", action="append",
                   help="only this quantity, e.g. gradient or differential (repeat for more)")
    p.add_argument("--term", metavar="NAME", action="append",
                   help="only the rows about this trait (its squared and paired terms too) or this exact term, "
                        "e.g. elytron:mass (repeat for more)")
    p.add_argument("--without-open-outliers", action="store_true",
                   help="leave out values with open outlier flags too (sensitivity)")
    ped = p.add_mutually_exclusive_group()
    ped.add_argument("--skip-pedigree", action="store_true",
                     help="no animal models (the pedigree rows take a while on large studies)")
    ped.add_argument("--pedigree", action="store_true",
                     help="fit the animal models with --bootstrap 0 too (by default that quick look leaves them out)")
    p.add_argument("--random-effects", choices=("dl", "hk"), default="dl",
                   help="interval of the mean gradient across seasons when tau² > 0: dl, DerSimonian-Laird "
                        "(normal; default), or hk, Hartung-Knapp (t, wider with few seasons)")
    p.add_argument("--output", metavar="FILE", help="write to FILE instead of the screen")

    p = command("summary", "one screen about the study: cells, flags, last batch, latest season's gradients")
    p.add_argument("--format", choices=("text", "json"), default="text")
    p.add_argument("--fitness", metavar="NAME", help="fitness measure of the gradients (default: the first total)")
    p.add_argument("--bootstrap", metavar="N", type=_count, default=2000, help="resamples (default 2000)")
    p.add_argument("--seed", metavar="N", type=_count, default=None, help="random seed, 0 or more (default: fixed)")

    p = command("changes", "what changed since a moment or a batch: batches, flags, corrections, estimates")
    p.add_argument("--since", metavar="WHEN", help="a date, a time or a batch number (default: your last run)")
    p.add_argument("--format", choices=("text", "json"), default="text")

    p = command("report", "write one self-contained HTML page about the study (tables, pictures, cautions)")
    p.add_argument("--output", metavar="FILE", required=True, help="the HTML file to write")
    p.add_argument("--season", metavar="S", help="only this season (default: every season)")
    p.add_argument("--site", metavar="S", help="tables and pictures of this site only (default: all sites)")
    p.add_argument("--since", metavar="WHEN", help="add what changed since a date, a time or a batch number")
    p.add_argument("--fitness", metavar="NAME", help="fitness measure (default: the first total)")
    p.add_argument("--bootstrap", metavar="N", type=_count, default=2000, help="resamples (default 2000)")
    p.add_argument("--seed", metavar="N", type=_count, default=None, help="random seed, 0 or more (default: fixed)")
    p.add_argument("--figures", metavar="DIR", help="also write each picture as SVG and PNG into DIR")

    p = command("demo", "the demo season (an invented study)")
    p.add_argument("--headless", action="store_true", help="no dashboard: take in the batches, print estimates")
    return parser


def _flag_id(text: str) -> int:
    try:
        value = int(text.lstrip("#"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a flag number (see fieldslope flags)") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} is not a flag number (see fieldslope flags)")
    return value


def _day(text: str):
    from fieldslope.tui.batch_list import parse_day

    try:
        return parse_day(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _name(text: str) -> str:
    """A person's name as typed: refused when it is blank (the record must say who)."""
    if not text.strip():
        raise argparse.ArgumentTypeError("is blank; give your name, or leave the option out to record your login name")
    return text


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be 0 or more")
    return value


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        from fieldslope.tui import cli_commands

        return cli_commands.run(args)
    except UsageError as exc:
        print(f"fieldslope: {escape_controls(exc)}", file=sys.stderr)
        return 2
    except FieldslopeError as exc:
        if debug:
            import traceback
            traceback.print_exc()
        print(f"fieldslope: {escape_controls(exc)}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("fieldslope: interrupted; nothing half-done was kept.", file=sys.stderr)
        return 1
    except BrokenPipeError:   # e.g. ``fieldslope estimate | head``: stop quietly
        import os
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # a bug: still one line, unless --debug
        if debug:
            raise
        print(f"fieldslope: unexpected failure ({type(exc).__name__}: {escape_controls(exc)}); run again with --debug "
              "and report it.", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
