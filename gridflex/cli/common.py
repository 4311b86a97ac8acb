"""What every command shares: logging levels, progress on stderr, error reporting."""

from __future__ import annotations

import argparse
import logging
import sys
import warnings
from collections.abc import Callable

from gridflex.errors import GridflexWarning

__all__ = [
    "add_common_options",
    "add_overwrite_option",
    "add_scenario_argument",
    "configure_output",
    "progress_printer",
]


def add_scenario_argument(parser: argparse.ArgumentParser, help: str) -> None:
    """The positional scenario file and the --overwrite guard of scenario commands."""
    parser.add_argument("scenario", help=help)
    add_overwrite_option(parser)


def add_overwrite_option(parser: argparse.ArgumentParser) -> None:
    """--overwrite: replace existing outputs (refused otherwise)."""
    parser.add_argument("--overwrite", action="store_true", help="replace existing outputs")


def add_common_options(parser: argparse.ArgumentParser) -> None:
    """-q/--quiet and -v/--verbose."""
    group = parser.add_mutually_exclusive_group()
    group.add_argument(
        "-q", "--quiet", action="store_true", help="print only errors (no progress, no summary)"
    )
    group.add_argument("-v", "--verbose", action="store_true", help="print debugging detail")


def _show_warning(message, category, filename, lineno, file=None, line=None):  # type: ignore[no-untyped-def]
    print(f"gridflex: warning: {message}", file=sys.stderr)


def configure_output(args: argparse.Namespace) -> None:
    """Map -q/-v to log levels on stderr and print warnings as one line each.

    Call inside ``warnings.catch_warnings()`` so the filters are restored afterwards.
    """
    level = logging.INFO
    if getattr(args, "verbose", False):
        level = logging.DEBUG
    elif getattr(args, "quiet", False):
        level = logging.ERROR
    logging.basicConfig(level=level, format="gridflex: %(message)s", stream=sys.stderr, force=True)
    warnings.simplefilter("ignore" if getattr(args, "quiet", False) else "always", GridflexWarning)
    warnings.showwarning = _show_warning


def progress_printer(args: argparse.Namespace) -> Callable[[int, int], None] | None:
    """A progress callback writing ``done/total`` on stderr, or None when quiet."""
    if getattr(args, "quiet", False):
        return None

    def report(done: int, total: int) -> None:
        end = "\n" if done >= total else "\r"
        print(f"gridflex: {done}/{total}", end=end, file=sys.stderr, flush=True)

    return report
