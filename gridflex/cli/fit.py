"""``gridflex fit SCENARIO.toml``: estimate te from the scenario's observation."""

from __future__ import annotations

import argparse

from gridflex.cli.common import add_common_options, add_scenario_argument, progress_printer
from gridflex.scenario.schema import load_scenario
from gridflex.workflows.fit import fit_scenario

NAME = "fit"
HELP = "estimate te from an observed grid: misfit plot, JSON summary, best model"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    add_scenario_argument(parser, "scenario file (TOML) with a [fit] table")
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    outcome = fit_scenario(
        load_scenario(args.scenario), overwrite=args.overwrite, progress=progress_printer(args)
    )
    if not args.quiet:
        fit = outcome.fit
        closed = "" if all(fit.interval_closed) else " (open: reaches a search bound)"
        print(
            f"te = {fit.te / 1e3:.3f} km, {fit.confidence:.0%} interval "
            f"[{fit.te_low / 1e3:.3f}, {fit.te_high / 1e3:.3f}] km{closed}"
        )
        if fit.load_scale != 1.0:
            print(f"load scale = {fit.load_scale:.4f} (fitted / given load)")
        print(
            f"offset = {fit.offset:.6g}, RMS misfit = {fit.rms:.6g} "
            f"({fit.n_data} cells, about {fit.n_effective:.0f} independent)"
        )
        for path in outcome.written:
            print(f"wrote {path}")
    return 0
