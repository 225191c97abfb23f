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
    # What the mode's estimators cancel for this protocol, then the verdict as the last line;
    # with --show stdout stays the document and its verdict, so these go to stderr.
    lines, estimator_warnings = loaded.mode.estimator_notes(loaded.protocol)
    advice = sys.stderr if args.show else sys.stdout
    if not args.show:
        for line in lines:
            print(line)
    for warning in report.warnings:
        print(f"warning: {warning}")
    for warning in estimator_warnings:
        print(f"warning: {warning}", file=advice)
    against = f" with rig {rig.rig.name!r}" if rig else " (no rig given: rig limits not checked)"
    print(f"ok: {loaded.path} is valid{against}")
    return EXIT_DONE


def cmd_estimate(args: argparse.Namespace) -> int:
    from acquire.plan.estimate import estimate, render

    loaded, rig = _load_pair(args.protocol, args.rig)
    print(render(estimate(loaded, rig), loaded.protocol))
    return EXIT_DONE


def cmd_patterns(args: argparse.Namespace) -> int:
    from acquire.modes.dc_reversal.pattern_analysis import COMMON_PATTERNS, table_lines
    from acquire.modes.dc_reversal.reduction import PATTERN_SYMBOLS

    patterns = tuple(args.pattern) or COMMON_PATTERNS
    for pattern in patterns:
        if not pattern or set(pattern) - set(PATTERN_SYMBOLS) or \
                pattern.count("+") != pattern.count("-") or "+" not in pattern:
            raise InputError(f"pattern {pattern!r}: use '+', '0' and '-' with as many '+' as "
                             "'-' (at least one of each), e.g. '+0-'")
    print("\n".join(table_lines(patterns)))
    return EXIT_DONE


def cmd_schema(args: argparse.Namespace) -> int:
    from acquire.reference.schema import SCHEMA_NAMES, schema_named

    names = [args.kind] if args.kind else list(SCHEMA_NAMES)
    if args.out is None:
        # To stdout, one document: the one named (the protocol's by default).
        print(json.dumps(schema_named(names[0] if args.kind else "protocol"), indent=2))
        return EXIT_DONE
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    for name in names:
        target = out / f"{name}.schema.json"
        target.write_text(json.dumps(schema_named(name), indent=2) + "\n", encoding="utf-8")
        print(f"wrote {target}")
    return EXIT_DONE


def cmd_docs(args: argparse.Namespace) -> int:
    from acquire.reference import stale_docs, write_docs

    if args.check is not None:
        stale = stale_docs(Path(args.check))
        if stale:
            print(f"stale: {', '.join(stale)} in {args.check} differ from the code; "
                  f"regenerate with 'flipsweep docs --out {args.check}'", file=sys.stderr)
            return EXIT_FAILURE
        print(f"ok: the generated pages in {args.check} match the code")
        return EXIT_DONE
    for path in write_docs(Path(args.out)):
        print(f"wrote {path}")
    return EXIT_DONE


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--debug", action="store_true", help="show Python tracebacks")


SIM_RIG = "protocols/rigs/simulated.yaml"
# One example per command, shown at the end of its --help.
EXAMPLES: dict[str, str] = {
    "check": f"flipsweep check protocols/angle_scan.yaml --rig {SIM_RIG} --show",
    "estimate": f"flipsweep estimate protocols/angle_scan.yaml --rig {SIM_RIG}",
    "schema": "flipsweep schema --out schemas",
    "patterns": "flipsweep patterns +0- +0--0+",
    "docs": "flipsweep docs --check docs",
    "run": f"flipsweep run protocols/angle_scan.yaml --rig {SIM_RIG} --simulate --seed 7 "
           "--out runs/demo",
    "resume": "flipsweep resume runs/demo",
    "status": "flipsweep status runs/demo",
    "reduce": "flipsweep reduce runs/demo",
    "fit": "flipsweep fit runs/demo --field-form linear --heating-warn 2",
    "report": "flipsweep report runs/demo",
    "instruments": f"flipsweep instruments --rig {SIM_RIG}",
    "serve": f"flipsweep serve {SIM_RIG} --protocol protocols/current_ladder.yaml "
             "--write-rig /tmp/lan_rig.yaml",
}


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

    def add(name: str, help_text: str, example: str = "") -> argparse.ArgumentParser:
        example = example or EXAMPLES.get(name, "")
        command = sub.add_parser(
            name, help=help_text, description=help_text,
            epilog=f"example:\n  {example}" if example else None,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        _add_common(command)
        command.set_defaults(handler=commands[name])
        return command

    check = add("check", "validate a protocol (and rig); exit 0, or 2 with one clear line")
    check.add_argument("protocol", help="the protocol file (YAML)")
    check.add_argument("--rig", help="the rig file: also check every value against its limits")
    check.add_argument("--show", action="store_true",
                       help="print the merged, normalised protocol (SI values) as run.json "
                            "stores it, with every default filled in")

    estimate = add("estimate", "points, readings, duration with breakdown, peak current density")
    estimate.add_argument("protocol", help="the protocol file (YAML)")
    estimate.add_argument("--rig", help="the rig file: its ramp rates, speeds and timings "
                                        "(without it, typical values)")

    patterns = add("patterns", "what alternation patterns cancel: first-order bias of the "
                               "resistance and unidirectional part to an offset, a voltage drift "
                               "and a resistance drift, and their noise factors (Markdown table)")
    patterns.add_argument("pattern", nargs="*",
                          help="patterns to tabulate, e.g. +0- (default: the common ones)")

    schema = add("schema", "JSON Schema of the protocol or rig file, for editors: printed, "
                           "or written with --out")
    schema.add_argument("kind", nargs="?", choices=["protocol", "rig"],
                        help="which schema (default: the protocol's to stdout, both with --out)")
    schema.add_argument("--out", metavar="DIR",
                        help="write <kind>.schema.json into this folder instead of printing")

    docs = add("docs", "write the reference pages generated from the code (protocol, rig and "
                       "output references), or check that they are current")
    target = docs.add_mutually_exclusive_group(required=True)
    target.add_argument("--out", metavar="DIR", help="write protocol.md, rig.md and output.md "
                                                     "into this folder (the project's: docs)")
    target.add_argument("--check", metavar="DIR",
                        help="exit 1 if the pages in this folder differ from the code")

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
        "patterns": cmd_patterns,
        "docs": cmd_docs,
    }
    from acquire.cli import run_commands, serve

    commands.update(run_commands.COMMANDS)
    EXTRA_COMMANDS.update(run_commands.ARGUMENTS)
    commands.update(serve.COMMANDS)
    EXTRA_COMMANDS.update(serve.ARGUMENTS)
    return commands


def main(argv: Sequence[str] | None = None) -> int:
    if argv is None:
        # The console script (the process is flipsweep's own): after a run, stop signals are
        # ignored until the process exits (acquire.runtime.stop_signals).
        from acquire.runtime.stop_signals import StopSignals

        StopSignals.ignore_after_run = True
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
