"""`flipsweep status DIR`: state, progress, ETA, what the run is doing, its last point.

A run whose process ended without closing it (kill -9, a crash, a power cut) still says
`running` in its status.json; it is shown as `stopped` when the folder's lock is free and
either the process ran on this machine or its heartbeat is stale.
"""

from __future__ import annotations

import socket
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from acquire.runtime.progress import HEARTBEAT_S, ratio_text
from acquire.store.run_folder import RunFolder

# A live run rewrites status.json at least every HEARTBEAT_S; three missed beats is no slip.
STALE_S = 3 * HEARTBEAT_S


def heartbeat_age_s(status: dict[str, Any]) -> float | None:
    try:
        updated = datetime.fromisoformat(str(status["updated_utc"]))
    except (KeyError, ValueError):
        return None
    return (datetime.now(timezone.utc) - updated).total_seconds()


def run_state(folder: RunFolder, status: dict[str, Any]) -> str:
    """running, stopped, or the state the run closed with (done, interrupted, failed)."""
    state = str(status.get("state", "unknown"))
    if state != "running" or folder.is_running():
        return state
    age = heartbeat_age_s(status)
    same_host = status.get("host") == socket.gethostname()
    if same_host or age is None or age > STALE_S:
        return "stopped"
    return "running"  # on another machine, with a fresh heartbeat: its lock is not ours to see


def show_status(path: Path) -> int:
    folder = RunFolder(path)
    folder.read_run_json()
    status = folder.read_status()
    if status is None:
        if folder.is_running():
            print(f"{folder.path}: no status yet (a process is starting the run)")
        else:
            print(f"{folder.path}: no status: the run stopped before its first heartbeat; "
                  f"'flipsweep resume {folder.path}' continues it")
        return 0
    state = run_state(folder, status)
    age = heartbeat_age_s(status)
    done, total = int(status.get("points_done", 0)), int(status.get("points_total", 0))
    if state == "stopped":
        print(f"state      stopped (its process ended without closing the run: killed, "
              f"crashed or power cut); 'flipsweep resume {folder.path}' continues it")
    else:
        print(f"state      {state}")
    print(f"progress   {done}/{total} points ({done / max(total, 1):.0%})")
    if state == "running":
        basis = status.get("eta_from", "estimate")
        print(f"ETA        {float(status.get('eta_s', 0.0)) / 60:.1f} min (run clock, from "
              f"the {basis})")
        if status.get("activity"):
            print(f"doing      {status['activity']}")
    if status.get("reason"):
        print(f"reason     {status['reason']}")
    if status.get("safe_state"):
        print(f"safe state {status['safe_state']}")
    if age is not None:
        print(f"heartbeat  {age:.0f} s ago (pid {status.get('pid')} on {status.get('host')})")
    last = status.get("last_point") or {}
    if last:
        shown = ratio_text(last.get("unidirectional_ratio_ppm"),
                           last.get("unidirectional_ratio_err_ppm"), last.get("dof"))
        print(f"last point {last['point']}: R = {last['resistance_ohm']:.6g} ohm, "
              f"unidirectional {shown}"
              + (f", flags {last['flags']}" if last.get("flags") else ""))
    return 0


def show_plan_status(out: Path) -> int:
    from acquire.runtime.night_plan import read_plan

    plan = read_plan(out)
    width = max(len(entry["folder"]) for entry in plan["runs"])
    for entry in plan["runs"]:
        folder = RunFolder(out / entry["folder"])
        status = folder.read_status() if folder.path.is_dir() else None
        if status is None:
            shown = "not started" if not folder.run_json.exists() else "no status yet"
        else:
            shown = (f"{run_state(folder, status)}, {status.get('points_done', 0)}/"
                     f"{status.get('points_total', 0)} points")
        print(f"{entry['folder']:<{width}}  {shown}")
    last = plan["history"][-1] if plan.get("history") else {}
    print(f"{'plan':<{width}}  {last.get('event', 'unknown')} since {last.get('utc', '?')}")
    return 0
