"""``gridflex demo``: solve the built-in invented island chain, no files needed."""

from __future__ import annotations

import argparse

from gridflex.cli.common import SubParsers, add_common_options, wrote
from gridflex.results.summary import format_summary
from gridflex.validation import check_path_text
from gridflex.workflows.demo import run_demo

NAME = "demo"
HELP = "solve an invented volcanic island chain and write its outputs"


def add_parser(subparsers: SubParsers) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    parser.add_argument(
        "--out", default="gridflex-demo", help="folder for the outputs (default: ./gridflex-demo)"
    )
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    check_path_text("--out", args.out)
    outcome = run_demo(args.out)
    if not args.quiet:
        te = float(outcome.result.attrs["plate_te"])
        print(f"Invented volcanic island chain on a {te / 1e3:g} km thick elastic plate:")
        print(format_summary(outcome.summary))
        print("\n".join(wrote(outcome.written)))
    return 0
