"""The ``isoturnover`` command line: parses arguments and calls the library."""

from __future__ import annotations

import argparse
import sys


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    p = argparse.ArgumentParser(
        prog="isoturnover",
        description="Turnover rates, half-lives and pool fractions from stable-isotope "
        "diet-switch experiments.",
    )
    p.add_argument("--version", action="version", version=f"isoturnover {__version__}")
    p.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    p.add_subparsers(dest="command", metavar="COMMAND")
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
