"""The `flipsweep` command line: argument parsing, exit codes, one-line errors."""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from acquire.errors import InputError, RunFailure
from acquire.runtime.cautions import CAUTION
from acquire.version import __version__

EXIT_DONE, EXIT_FAILURE, EXIT_INVALID, EXIT_INTERRUPTED = 0, 1, 2, 130


def _load_pair(protocol_path: str, rig_path: str | None):  # returns (LoadedProtocol, LoadedRig)
    from acquire.inputs.load import check_pair, load_protocol, load_rig

    loaded = load_protocol(Path(protocol_path))
    rig = load_rig(Path(rig_path)) if rig_path else None
    if rig is not None:
        check_pair(loaded, rig)
    return loaded, rig


def cmd_check(args: argparse.Namespace) -> int:
    from acquire.inputs.normalise import normalised_protocol
    from acquire.plan.limits import check_limits

    loaded, rig = _load_pair(args.protocol, args.rig)
    report = check_limits(loaded, rig)
    if args.show:
        import yaml

        print(yaml.safe_dump(normalised_protocol(loaded), sort_keys=False), end="")
    for warning in report.warnings:
        print(f"warning: {warning}")
    against = f" with rig {rig.rig.name!r}" if rig else " (no rig given: rig limits not checked)"
    print(f"ok: {loaded.path} is valid{against}")
    return EXIT_DONE


def cmd_estimate(args: argparse.Namespace) -> int:
    from acquire.plan.estimate import estimate, render

    loaded, rig = _load_pair(args.protocol, args.rig)
    print(render(estimate(loaded, rig), loaded.protocol))
    return EXIT_DONE


def cmd_schema(args: argparse.Namespace) -> int:
    from acquire.modes import mode_named
    from drivers.rig import Rig

    Protocol = mode_named("dc_reversal").protocol_model

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    for name, model in (("protocol", Protocol), ("rig", Rig)):
        schema = model.model_json_schema(by_alias=True)
        schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
        # A file may extend a base file (see acquire.yaml_source); its required keys may then
        # all come from the base, so they are required only of a file without 'extends'.
        schema["properties"] = {
            "extends": {"type": "string", "description": "path of a base file, relative to this"},
            "extends_anywhere": {"type": "boolean", "description": "let `extends` leave this "
                                 "file's folder (only in the file given on the command line)"},
            **schema["properties"],
        }
        required = schema.pop("required", [])
        schema["if"] = {"required": ["extends"]}
        schema["else"] = {"required": required}
        target = out / f"{name}.schema.json"
        target.write_text(json.dumps(schema, indent=2) + "\n", encoding="utf-8")
        print(f"wrote {target}")
    return EXIT_DONE


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--debug", action="store_true", help="show Python tracebacks")


def build_parser(
    commands: dict[str, Callable[[argparse.Namespace], int]],
) -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="flipsweep",
        description="Unattended current-reversal magnetotransport sweeps.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"flipsweep {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def add(name: str, help_text: str) -> argparse.ArgumentParser:
        command = sub.add_parser(name, help=help_text, description=help_text)
        _add_common(command)
        command.set_defaults(handler=commands[name])
        return command

    check = add("check", "validate a protocol (and rig); exit 0, or 2 with one clear line")
    check.add_argument("protocol")
    check.add_argument("--rig")
    check.add_argument("--show", action="store_true", help="print the merged, normalised protocol")

    estimate = add("estimate", "points, readings, duration with breakdown, peak current density")
    estimate.add_argument("protocol")
    estimate.add_argument("--rig")

    schema = add("schema", "write JSON Schemas of protocol and rig files for editors")
    schema.add_argument("--out", default=".", help="folder for the schema files")

    for name, extra in EXTRA_COMMANDS.items():
        if name in commands:
            extra(add)
    return parser


# Commands added by later modules register here: name -> function adding its arguments.
EXTRA_COMMANDS: dict[str, Callable[[Callable[[str, str], argparse.ArgumentParser]], None]] = {}


def _commands() -> dict[str, Callable[[argparse.Namespace], int]]:
    commands: dict[str, Callable[[argparse.Namespace], int]] = {
        "check": cmd_check,
        "estimate": cmd_estimate,
        "schema": cmd_schema,
    }
    from acquire.cli import run_commands, serve

    commands.update(run_commands.COMMANDS)
    EXTRA_COMMANDS.update(run_commands.ARGUMENTS)
    commands.update(serve.COMMANDS)
    EXTRA_COMMANDS.update(serve.ARGUMENTS)
    return commands


def main(argv: Sequence[str] | None = None) -> int:
    commands = _commands()
    parser = build_parser(commands)
    args = parser.parse_args(argv)
    try:
        return args.handler(args)
    except InputError as error:
        if args.debug:
            raise
        print(f"error: {error.one_line()}", file=sys.stderr)
        return EXIT_INVALID
    except RunFailure as error:
        if args.debug:
            raise
        print(f"failed: {error}", file=sys.stderr)
        return EXIT_FAILURE
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # The reader went away (`flipsweep check --show | head`): not an error of ours.
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_DONE
    except Exception as error:  # a bug: one line for the user, the traceback with --debug
        if args.debug:
            raise
        print(f"internal error: {type(error).__name__}: {error} (rerun with --debug)",
              file=sys.stderr)
        return EXIT_FAILURE


if __name__ == "__main__":
    sys.exit(main())
