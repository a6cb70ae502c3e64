"""The ``fieldslope`` command line (the dashboard is started from here too)."""

from __future__ import annotations

import argparse
import sys

from schemas.errors import FieldslopeError

VERSION = "0.1.0"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="fieldslope", description="Measure selection during a field season.")
    parser.add_argument("--version", action="version", version=f"fieldslope {VERSION}")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        parser.parse_args(argv)
    except FieldslopeError as exc:
        print(f"fieldslope: {exc}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
