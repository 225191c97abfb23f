"""Every subcommand's --help explains every argument and shows one example; `schema` prints
unless told where to write."""

from __future__ import annotations

import argparse
import json
import os
from collections.abc import Callable
from pathlib import Path

import pytest

from acquire.cli.main import _commands, build_parser
from tests.conftest import CliResult

Cli = Callable[[list[str]], CliResult]


def subcommands() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser(_commands())
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


SUBCOMMANDS = subcommands()


def test_the_commands_of_the_readme_are_all_there() -> None:
    assert set(SUBCOMMANDS) >= {"check", "estimate", "run", "resume", "status", "reduce", "fit",
                                "report", "instruments", "schema", "docs", "serve"}


@pytest.mark.parametrize("name", sorted(SUBCOMMANDS))
def test_every_argument_has_help_text(name: str) -> None:
    for action in SUBCOMMANDS[name]._actions:
        if isinstance(action, argparse._HelpAction):
            continue
        what = action.option_strings or [action.dest]
        assert action.help and action.help.strip(), f"{name} {what[0]} has no help text"


@pytest.mark.parametrize("name", sorted(SUBCOMMANDS))
def test_every_command_has_a_description_and_an_example(name: str) -> None:
    parser = SUBCOMMANDS[name]
    assert parser.description
    assert parser.epilog and parser.epilog.startswith("example:\n  flipsweep " + name), name
    assert "example:\n  flipsweep " + name in parser.format_help()  # kept as written


@pytest.mark.parametrize("name", sorted(SUBCOMMANDS))
def test_every_example_parses(name: str) -> None:
    example = SUBCOMMANDS[name].epilog.split("flipsweep ", 1)[1].split()  # type: ignore[union-attr]
    args = build_parser(_commands()).parse_args(example)
    assert args.command == name


def test_schema_prints_to_stdout_and_writes_nothing(tmp_path: Path, cli: Cli,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    result = cli(["schema"])
    assert result.code == 0
    assert json.loads(result.out)["properties"]["loops"]["type"] == "array"  # the protocol's
    rig = cli(["schema", "rig"])
    assert "instruments" in json.loads(rig.out)["properties"]
    assert os.listdir(tmp_path) == []


def test_schema_with_out_writes_the_named_files(tmp_path: Path, cli: Cli) -> None:
    result = cli(["schema", "rig", "--out", str(tmp_path / "schemas")])
    assert result.code == 0
    assert os.listdir(tmp_path / "schemas") == ["rig.schema.json"]
