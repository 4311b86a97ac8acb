"""``gridflex profile RESULT.nc --start X Y --end X Y``: values along a line to CSV."""

from __future__ import annotations

import argparse

import xarray as xr

from gridflex.cli.common import SubParsers, add_common_options, add_overwrite_option, wrote
from gridflex.errors import InputError
from gridflex.io.atomic import OutputSet
from gridflex.io.netcdf import read_result
from gridflex.io.plots import plot_profile
from gridflex.io.tables import write_csv
from gridflex.results.profile import at_step, one_column_per_step, sample_profile
from gridflex.validation import check_path_text

NAME = "profile"
HELP = "sample a result grid along a straight line and write a CSV (and a plot)"


def add_parser(subparsers: SubParsers) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    parser.add_argument("result", help="result NetCDF written by 'gridflex run'")
    for point, text in (
        ("start", "start point in the grid's map coordinates (m, or lon lat)"),
        ("end", "end point in the grid's map coordinates"),
    ):
        parser.add_argument(
            f"--{point}", nargs=2, type=float, required=True, metavar=("X", "Y"), help=text
        )
    parser.add_argument("--csv", required=True, help="CSV file to write")
    parser.add_argument("--plot", help="PNG plot of the profile")
    parser.add_argument("--samples", type=int, help="number of points (default: 2 per cell)")
    parser.add_argument("--variables", nargs="+", help="variables to sample (default: all)")
    parser.add_argument(
        "--at",
        type=float,
        metavar="VALUE",
        help="for a result with a time, stage or step axis: sample only the step nearest "
        "VALUE (years for a history, the age in years before present for a basin's "
        "stages; default: a column per step)",
    )
    add_overwrite_option(parser)
    add_common_options(parser)


def _check_plot(profile: xr.Dataset, where: str) -> None:
    """The profile holds what :func:`~gridflex.io.plots.plot_profile` draws, one step of it."""
    if "deflection" not in profile:
        raise InputError(
            f"{where}: --plot draws the deflection, which this profile has not "
            f"(variables: {', '.join(map(str, profile.data_vars))}); leave out --plot"
        )
    drawn = [profile[n] for n in ("deflection", "surface", "load") if n in profile]
    if any(v.dims != ("distance",) for v in drawn):
        raise InputError(f"{where}: --plot draws one step; choose it with --at")


def execute(args: argparse.Namespace) -> int:
    for name, path in (("RESULT", args.result), ("--csv", args.csv), ("--plot", args.plot)):
        if path is not None:
            check_path_text(name, path)
    files = OutputSet(args.overwrite, [args.result])
    files.add({"--csv": args.csv, "--plot": args.plot})  # checked before any work
    result = read_result(args.result)
    if args.at is not None:
        result = at_step(result, args.at, args.result)
    profile = sample_profile(result, args.start, args.end, args.samples, args.variables)
    if args.plot:
        _check_plot(profile, args.result)
    table = one_column_per_step(profile)
    inputs = [args.result]
    with files.writing():  # both files or neither
        written = [write_csv(table, args.csv, args.overwrite, inputs)]
        if args.plot:
            written.append(plot_profile(profile, args.plot, args.overwrite, inputs))
    if not args.quiet:
        print("\n".join(wrote(written)))
    return 0
