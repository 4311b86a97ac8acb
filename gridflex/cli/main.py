"""Entry point of the ``gridflex`` command."""

from __future__ import annotations

import argparse
import logging
import sys
import warnings
from collections.abc import Sequence
from types import ModuleType

from gridflex._version import __version__
from gridflex.cli import basin, demo, fit, history, profile, run, sweep, temap
from gridflex.cli.common import configure_output, one_line
from gridflex.errors import ConvergenceError, GridflexError

COMMANDS: tuple[ModuleType, ...] = (run, history, fit, sweep, demo, profile, basin, temap)
"""Command modules; each has NAME, add_parser(subparsers) and execute(args)."""

EXIT_INPUT = 2
EXIT_CONVERGENCE = 3
EXIT_FAILURE = 1


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="gridflex",
        description="Flexure of the lithosphere under gridded loads.",
    )
    parser.add_argument("--version", action="version", version=f"gridflex {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMANDS:
        module.add_parser(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (0 ok, 2 bad input or an output that
    could not be written, 3 no convergence, 1 any other failure)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_INPUT
    handler = {module.NAME: module.execute for module in COMMANDS}[args.command]
    try:
        with warnings.catch_warnings():
            configure_output(args)
            return handler(args)
    except ConvergenceError as exc:
        print(f"gridflex: error: {one_line(exc)}", file=sys.stderr)
        return EXIT_CONVERGENCE
    except GridflexError as exc:
        print(f"gridflex: error: {one_line(exc)}", file=sys.stderr)
        return EXIT_INPUT
    except OSError as exc:
        print(
            f"gridflex: error: {one_line(exc.filename or '')}: {one_line(exc.strerror or exc)}",
            file=sys.stderr,
        )
        return EXIT_INPUT
    except MemoryError as exc:  # a step whose estimate fell short: still one line
        print(
            f"gridflex: error: out of memory ({exc or 'allocation failed'}); use coarser "
            "cells, a smaller domain or less padding",
            file=sys.stderr,
        )
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("gridflex: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug or a library failure: still one line, no traceback
        logging.getLogger(__name__).debug("traceback", exc_info=True)
        print(
            f"gridflex: error: {type(exc).__name__}: {one_line(exc)} "
            "(run with -v for the traceback)",
            file=sys.stderr,
        )
        return EXIT_FAILURE
