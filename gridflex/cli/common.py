"""What every command shares: arguments, logging levels, progress on stderr, reporting."""

from __future__ import annotations

import argparse
import logging
import sys
import time
import warnings
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Generic, TextIO, TypeVar

from gridflex.errors import GridflexWarning
from gridflex.progress import Progress

__all__ = [
    "ScenarioCommand",
    "SubParsers",
    "add_common_options",
    "add_overwrite_option",
    "add_scenario_argument",
    "add_scenario_command",
    "configure_output",
    "execute_scenario_command",
    "format_duration",
    "progress_printer",
    "wrote",
]

Outcome = TypeVar("Outcome")

SubParsers = argparse._SubParsersAction  # the type argparse gives add_subparsers()


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


def add_scenario_command(
    subparsers: SubParsers, name: str, help: str, scenario_help: str
) -> argparse.ArgumentParser:
    """A sub-command that reads one scenario file: SCENARIO, --overwrite, -q and -v.

    Returns the parser, for a command's own options.
    """
    parser: argparse.ArgumentParser = subparsers.add_parser(name, help=help, description=help)
    add_scenario_argument(parser, scenario_help)
    add_common_options(parser)
    return parser


def execute_scenario_command(
    args: argparse.Namespace,
    load: Callable[[str], Any],
    call: Callable[[Any, bool, Progress | None], Outcome],
    report: Callable[[Outcome], Iterable[str]],
) -> int:
    """Load ``args.scenario``, call the library on it and print the report.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments of a command declared by :func:`add_scenario_command`.
    load : callable
        Reads and validates the scenario file (path -> scenario).
    call : callable
        ``call(scenario, overwrite, progress)``: the one library function of the command.
    report : callable
        The lines to print about its outcome (not printed with --quiet).

    Returns
    -------
    int
        The exit status, 0.
    """
    outcome = call(load(args.scenario), args.overwrite, progress_printer(args))
    if not args.quiet:
        for line in report(outcome):
            print(line)
    return 0


@dataclass(frozen=True)
class ScenarioCommand(Generic[Outcome]):
    """A command that reads one scenario file, calls one library function, reports.

    A command module binds ``add_parser`` and ``execute`` to one of these (see
    :data:`gridflex.cli.main.COMMANDS`).

    Parameters
    ----------
    name, help : str
        The sub-command and its one-line description.
    scenario_help : str
        Help of the SCENARIO argument.
    load : callable
        Reads and validates the scenario file (path -> scenario).
    call : callable
        ``call(scenario, overwrite, progress)``: the command's library function.
    report : callable
        The lines to print about the outcome (see :func:`wrote`).
    """

    name: str
    help: str
    scenario_help: str
    load: Callable[[str], Any]
    call: Callable[[Any, bool, Progress | None], Outcome]
    report: Callable[[Outcome], Iterable[str]]

    def add_parser(self, subparsers: SubParsers) -> argparse.ArgumentParser:
        """Declare the sub-command: SCENARIO, --overwrite, -q and -v."""
        return add_scenario_command(subparsers, self.name, self.help, self.scenario_help)

    def execute(self, args: argparse.Namespace) -> int:
        """Run the command on parsed arguments; the exit status (0)."""
        return execute_scenario_command(args, self.load, self.call, self.report)


def wrote(paths: Iterable[str | Path]) -> list[str]:
    """One ``wrote PATH`` line per file written."""
    return [f"wrote {path}" for path in paths]


def one_line(message: object) -> str:
    """*message* as text on one line: control characters (a newline or an escape code in a
    scenario key, a file name or a value) are shown as escapes, never printed raw."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(message))


_progress_line_open = [False]
"""Whether a progress line ending in a carriage return is on stderr: the next message
starts a new line first, so that it does not run into the progress."""


def _close_progress_line() -> None:
    if _progress_line_open[0]:
        sys.stderr.write("\n")
        _progress_line_open[0] = False


class _MessageHandler(logging.StreamHandler):
    """Log lines on stderr, each on a line of its own after an open progress line."""

    def emit(self, record: logging.LogRecord) -> None:
        _close_progress_line()
        super().emit(record)


def _show_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: TextIO | None = None,
    line: str | None = None,
) -> None:
    _close_progress_line()
    print(f"gridflex: warning: {one_line(message)}", file=sys.stderr)


def configure_output(args: argparse.Namespace) -> None:
    """Map -q/-v to log levels on stderr and print warnings as one line each.

    Call inside ``warnings.catch_warnings()`` so the filters are restored afterwards.
    """
    level = logging.INFO
    if getattr(args, "verbose", False):
        level = logging.DEBUG
    elif getattr(args, "quiet", False):
        level = logging.ERROR
    handler = _MessageHandler(sys.stderr)
    logging.basicConfig(level=level, format="gridflex: %(message)s", handlers=[handler], force=True)
    _progress_line_open[0] = False
    warnings.simplefilter("ignore" if getattr(args, "quiet", False) else "always", GridflexWarning)
    warnings.showwarning = _show_warning


def progress_printer(
    args: argparse.Namespace, clock: Callable[[], float] = time.monotonic
) -> Progress | None:
    """A progress callback writing ``done/total`` and the time left on stderr, or None
    when quiet.

    The time left is the time per step so far times the steps left (shown once a step
    is done and at least a second has passed; *clock* gives seconds).
    """
    if getattr(args, "quiet", False):
        return None
    start = clock()
    shown = [0]  # length of the line last written, to wipe what a shorter one leaves

    def report(done: int, total: int) -> None:
        end = "\n" if done >= total else "\r"
        elapsed = clock() - start
        left = ""
        if 0 < done < total and elapsed >= 1.0:
            left = f", about {format_duration(elapsed / done * (total - done))} left"
        line = f"gridflex: {done}/{total}{left}"
        print(line.ljust(shown[0]), end=end, file=sys.stderr, flush=True)
        shown[0] = len(line)
        _progress_line_open[0] = end == "\r"

    return report


def format_duration(seconds: float) -> str:
    """*seconds* as ``"42 s"``, ``"3 min 05 s"`` or ``"2 h 07 min"``.

    Examples
    --------
    >>> format_duration(42.4), format_duration(185.0), format_duration(7620.0)
    ('42 s', '3 min 05 s', '2 h 07 min')
    """
    whole = int(round(seconds))
    if whole < 60:
        return f"{whole} s"
    if whole < 3600:
        return f"{whole // 60} min {whole % 60:02d} s"
    return f"{whole // 3600} h {whole % 3600 // 60:02d} min"
