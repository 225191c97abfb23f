"""A night plan: several protocols on one rig, one after the other, each into its own run folder.

    flipsweep run a.yaml b.yaml c.yaml --rig RIG --out NIGHT
    flipsweep resume NIGHT          # continues the plan where it stopped
    flipsweep status NIGHT          # each run's state

Every protocol is checked against the rig, and the combined estimate shown, before anything is
sent. NIGHT gets plan.json (the plan: the runs in order, each protocol's SHA-256) and one
folder per protocol (01-a, 02-b, ...), each an ordinary run folder. The runs' own `notify` is
held back; the plan notifies once, at its end, with its state and NIGHT. A run that fails or is
interrupted ends the plan there (its instruments already made safe); resume takes it up again.
"""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path
from typing import Any

from acquire.errors import InputError, RunFailure
from acquire.inputs.load import load_protocol, load_rig
from acquire.plan.estimate import format_duration
from acquire.runtime.execute import EXIT_DONE, EXIT_INTERRUPTED, RunOptions, notify_program
from acquire.runtime.resume import resume_run
from acquire.runtime.session import Prepared, prepare, run_prepared
from acquire.runtime.stop_signals import StopSignals
from acquire.store.run_folder import RunFolder, utc_now
from acquire.store.run_record import sha256_text
from acquire.store.safe_files import atomic_write_text

PLAN_FILE = "plan.json"
PLAN_VERSION = 1


def is_plan(path: Path) -> bool:
    return (path / PLAN_FILE).is_file() and not (path / "run.json").exists()


def _folder_names(protocols: list[Path]) -> list[str]:
    width = max(2, len(str(len(protocols))))
    names = []
    for index, path in enumerate(protocols, start=1):
        stem = re.sub(r"[^A-Za-z0-9._-]+", "-", path.stem).strip("-") or "protocol"
        names.append(f"{index:0{width}d}-{stem}")
    return names


def _sha(path: Path) -> str:
    return sha256_text(path.read_text(encoding="utf-8"))


def _estimate_table(prepared: list[Prepared], names: list[str]) -> str:
    width = max(len(name) for name in names)
    lines = [f"{'run':<{width}}  {'points':>8}  duration"]
    for name, entry in zip(names, prepared):
        lines.append(f"{name:<{width}}  {entry.estimated.points:>8}  "
                     f"{format_duration(entry.estimated.duration_s)}")
    total_points = sum(entry.estimated.points for entry in prepared)
    total_s = sum(entry.estimated.duration_s for entry in prepared)
    lines.append(f"{'plan':<{width}}  {total_points:>8}  {format_duration(total_s)} "
                 f"(estimate, {len(prepared)} runs in sequence)")
    return "\n".join(lines)


def _write_plan(out: Path, plan: dict[str, Any]) -> None:
    atomic_write_text(out / PLAN_FILE, json.dumps(plan, indent=2) + "\n")


def read_plan(out: Path) -> dict[str, Any]:
    path = out / PLAN_FILE
    try:
        plan = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        raise InputError(f"plan.json cannot be read ({error})", file=str(path),
                         fix="restore plan.json, or resume each run folder in it by itself"
                         ) from None
    if not isinstance(plan, dict) or plan.get("flipsweep_plan") != PLAN_VERSION:
        raise InputError("plan.json is not a flipsweep night plan", file=str(path),
                         fix="resume each run folder in it by itself")
    return plan


def start_plan(protocols: list[Path], rig_path: Path, out: Path, options: RunOptions) -> int:
    signals = StopSignals()
    with signals.installed():
        rig = load_rig(rig_path)
        held = dataclasses.replace(options, notify=False)
        prepared = [prepare(path, rig_path, held, rig) for path in protocols]
        names = _folder_names(protocols)
        print(_estimate_table(prepared, names))
        folder = RunFolder(out)
        folder.prepare_new(sum(entry.estimated.data_bytes for entry in prepared))
        plan = {
            "flipsweep_plan": PLAN_VERSION,
            "rig": {"path": str(rig_path.resolve()), "sha256": _sha(rig_path)},
            "options": {"simulate": prepared[0].options.simulate, "seed": options.seed,
                        "realtime": options.realtime,
                        "notify_in_rehearsal": options.notify_in_rehearsal},
            "runs": [{"folder": name, "protocol": str(path.resolve()), "sha256": _sha(path)}
                     for name, path in zip(names, protocols)],
            "history": [{"event": "start", "utc": utc_now()}],
        }
        with folder.locked():
            _write_plan(out, plan)
            return _run_plan(out, plan, prepared, signals, options.progress)


def resume_plan(out: Path, progress: bool = True) -> int:
    signals = StopSignals()
    with signals.installed():
        plan = read_plan(out)
        folder = RunFolder(out)
        folder.check_writable()
        with folder.locked():
            plan["history"].append({"event": "resume", "utc": utc_now()})
            _write_plan(out, plan)
            return _run_plan(out, plan, None, signals, progress)


def _options(plan: dict[str, Any], progress: bool) -> RunOptions:
    saved = plan.get("options", {})
    return RunOptions(simulate=bool(saved.get("simulate")), seed=saved.get("seed"),
                      realtime=bool(saved.get("realtime")), progress=progress,
                      notify_in_rehearsal=bool(saved.get("notify_in_rehearsal")), notify=False)


def _prepare_entry(plan: dict[str, Any], entry: dict[str, Any], progress: bool) -> Prepared:
    protocol = Path(entry["protocol"])
    rig = Path(plan["rig"]["path"])
    for kind, path, sha in (("protocol", protocol, entry["sha256"]),
                            ("rig", rig, plan["rig"]["sha256"])):
        try:
            same = _sha(path) == sha
        except OSError:
            same = False
        if not same:
            raise InputError(f"the {kind} {path} is missing or changed since the plan started "
                             "(SHA-256 differs)", file=str(path), key=(kind,),
                             fix="restore the original file, or start a new plan")
    return prepare(protocol, rig, _options(plan, progress))


def _closed(run_dir: Path) -> bool:
    """The run in this folder finished (its last history event is `done`)."""
    try:
        record = RunFolder(run_dir).read_run_json()
    except InputError:
        return False
    return bool(record.history) and record.history[-1].event == "done"


def _run_plan(out: Path, plan: dict[str, Any], prepared: list[Prepared] | None,
              signals: StopSignals, progress: bool) -> int:
    # Until the last run is done, whatever ends the plan (a signal between runs included)
    # leaves it interrupted.
    state, code = "interrupted", EXIT_INTERRUPTED
    try:
        for index, entry in enumerate(plan["runs"]):
            run_dir = out / entry["folder"]
            print(f"plan {out}: run {index + 1} of {len(plan['runs'])}: {entry['folder']}")
            signals.rearm()
            if (run_dir / "run.json").exists():
                if _closed(run_dir):
                    print(f"run {run_dir}: already done")
                    continue
                code = resume_run(run_dir, progress=progress, signals=signals, notify=False)
            else:
                ready = prepared[index] if prepared else _prepare_entry(plan, entry, progress)
                code = run_prepared(ready, run_dir, signals)
            if code != EXIT_DONE or signals.received:
                code = code if code != EXIT_DONE else EXIT_INTERRUPTED
                break
        else:
            state, code = "done", EXIT_DONE
    except RunFailure:
        state = "failed"
        raise
    except InputError:
        state = "failed"
        raise
    finally:
        _end_plan(out, plan, state)
    return code


def _end_plan(out: Path, plan: dict[str, Any], state: str) -> None:
    plan["history"].append({"event": state, "utc": utc_now()})
    try:
        _write_plan(out, plan)
    except OSError as error:
        print(f"plan {out}: plan.json could not be written ({error.strerror})")
    again = "" if state == "done" else f"; 'flipsweep resume {out}' continues the plan"
    print(f"plan {out}: {state}{again}")
    options = _options(plan, progress=False)
    if options.simulate and not options.notify_in_rehearsal:
        return
    commands: list[list[str]] = []
    for entry in plan["runs"]:
        try:
            command = load_protocol(Path(entry["protocol"])).protocol.notify
        except InputError:
            continue
        if command and command not in commands:
            commands.append(list(command))
    for command in commands:
        notify_program(command, state, str(out))
