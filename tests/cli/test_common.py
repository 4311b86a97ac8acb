"""The pieces every command shares: declaring a scenario command, running it, progress."""

from __future__ import annotations

import argparse

import pytest

from gridflex.cli.common import (
    add_scenario_command,
    execute_scenario_command,
    progress_printer,
    wrote,
)
from gridflex.cli.main import COMMANDS, build_parser


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="gridflex")
    subparsers = parser.add_subparsers(dest="command")
    add_scenario_command(subparsers, "try", "try a scenario", "scenario file")
    return parser


def test_scenario_command_arguments():
    args = _parser().parse_args(["try", "s.toml", "--overwrite", "-q"])
    assert (args.scenario, args.overwrite, args.quiet, args.verbose) == (
        "s.toml",
        True,
        True,
        False,
    )
    args = _parser().parse_args(["try", "s.toml"])
    assert (args.overwrite, args.quiet) == (False, False)
    with pytest.raises(SystemExit):
        _parser().parse_args(["try", "s.toml", "-q", "-v"])  # one or the other


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[list, str]:
    calls: list = []

    def call(scenario, overwrite, progress):
        calls.append((scenario, overwrite, progress))
        return 7

    args = _parser().parse_args(argv)
    status = execute_scenario_command(
        args, lambda path: f"loaded {path}", call, lambda n: [f"n = {n}", *wrote(["a.nc"])]
    )
    assert status == 0
    return calls, capsys.readouterr().out


def test_execute_loads_calls_and_reports(capsys):
    calls, out = _run(["try", "s.toml", "--overwrite"], capsys)
    [(scenario, overwrite, progress)] = calls
    assert (scenario, overwrite) == ("loaded s.toml", True)
    assert callable(progress)
    assert out == "n = 7\nwrote a.nc\n"


def test_execute_quiet_prints_nothing_and_has_no_progress(capsys):
    calls, out = _run(["try", "s.toml", "-q"], capsys)
    assert calls[0][1:] == (False, None)
    assert out == ""


def test_progress_printer_writes_done_of_total_on_stderr(capsys):
    report = progress_printer(argparse.Namespace(quiet=False))
    assert report is not None
    report(1, 3)
    report(3, 3)
    assert capsys.readouterr().err == "gridflex: 1/3\rgridflex: 3/3\n"
    assert progress_printer(argparse.Namespace(quiet=True)) is None


def test_every_command_module_is_declared_once():
    names = [module.NAME for module in COMMANDS]
    assert len(names) == len(set(names))
    parser = build_parser()
    for name in ("run", "fit", "sweep", "history", "basin"):
        args = parser.parse_args([name, "s.toml", "-q"])
        assert (args.command, args.scenario, args.quiet) == (name, "s.toml", True)
    assert parser.parse_args(["sweep", "s.toml", "--scheduler", "threads"]).scheduler == "threads"


def test_progress_shows_the_time_left(capsys):
    # time left = time per step so far x steps left (common practice); a fake clock
    ticks = iter([100.0, 110.0, 130.0, 160.0])
    args = _parser().parse_args(["try", "s.toml"])
    report = progress_printer(args, clock=lambda: next(ticks))
    assert report is not None
    report(1, 10)  # 10 s for one step: 9 left, 90 s
    report(2, 10)  # 30 s for two: 8 left, 120 s
    report(10, 10)
    err = capsys.readouterr().err
    assert "gridflex: 1/10, about 1 min 30 s left" in err
    assert "gridflex: 2/10, about 2 min 00 s left" in err
    assert err.rstrip().endswith("gridflex: 10/10") and err.endswith("\n")
    quiet = _parser().parse_args(["try", "s.toml", "-q"])
    assert progress_printer(quiet) is None


def test_a_message_after_an_open_progress_line_starts_a_line_of_its_own(capsys):
    # common practice: a log line or warning never runs into a "\r" progress line
    import logging
    import warnings

    from gridflex.cli.common import configure_output

    args = argparse.Namespace(quiet=False, verbose=False)
    with warnings.catch_warnings():
        configure_output(args)
        report = progress_printer(args)
        assert report is not None
        report(1, 2)
        logging.getLogger("gridflex.test").info("solved")
        report(2, 2)
        logging.getLogger("gridflex.test").info("done")
    err = capsys.readouterr().err
    assert err == "gridflex: 1/2\r\ngridflex: solved\ngridflex: 2/2\ngridflex: done\n"
