"""Trials of a run's safety over the served rig: the first query hit by a fault, a stalled
source, stop signals during the safe shutdown, a kill -9 inside a long point."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from acquire.runtime.runner import Runner
from acquire.runtime.serve import served_rig
from acquire.runtime.stop_signals import Interrupted, StopSignals
from sim_instruments.faults import Fault, FaultPlan
from tests.conftest import SIMULATED_RIG, run_cli
from tests.test_socket_server import PROTOCOL, RIG, assert_complete

ROOT = Path(__file__).resolve().parents[1]
SHORT_BACKOFF_S = (0.01, 0.02, 0.05)


@pytest.fixture
def short_backoff(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(Runner, "retry_backoff_s", SHORT_BACKOFF_S)


def run_served_with(rig_file: Path, out: Path, protocol: Path = PROTOCOL) -> tuple[int, str, str]:
    result = run_cli(["run", str(protocol), "--rig", str(rig_file), "--out", str(out),
                      "--quiet"])
    return result.code, result.out, result.err


# -- the first *IDN? hit by a fault -------------------------------------------------------------
@pytest.mark.parametrize("identify", [None, "ID?"])
# (A garbled identity is no fault a run can see: *IDN? may answer any text.)
@pytest.mark.parametrize("fault", [Fault.LATE, Fault.DROP])
def test_a_fault_on_the_first_identity_query_does_not_end_the_run(
    tmp_path: Path, short_backoff: None, fault: Fault, identify: str | None
) -> None:
    rig = RIG
    if identify is not None:
        # A rig whose source answers its identity to a command of its own.
        rig = tmp_path / "rig.yaml"
        rig.write_text(RIG.read_text().replace(
            "limits: {current: 20 mA}, timeout: 0.5 s,",
            "limits: {current: 20 mA}, timeout: 0.5 s, "
            f"commands: {{identify: '{identify}'}},"))
    plan = FaultPlan(scripted={"source": {1: fault}})
    out = tmp_path / "run"
    with served_rig(PROTOCOL, rig, seed=4, faults=plan) as served:
        code, shown, err = run_served_with(served.write_rig(tmp_path / "served.yaml"), out)
        assert [(e.instrument, e.transaction, e.fault) for e in served.faults.events] == [
            ("source", 1, fault)]
    assert code == 0, err
    assert "Traceback" not in err and "internal error" not in err
    log = (out / "run.log").read_text()
    assert "identify source: source:" in log and "retry 1 of 2" in log
    record = json.loads((out / "run.json").read_text())
    assert record["instruments"]["source"] == "flipsweep-sim,current_source,source,1.0"
    points = assert_complete(out)
    # The fault came before any point: the first point carries the flag.
    assert points.set_index("point")["flags"][0] == "retry"
    assert "safe state verified" in shown


# -- a stalled source: the truth about the safe state -------------------------------------------
def test_a_stalled_source_is_reported_as_not_verified_safe(
    tmp_path: Path, short_backoff: None
) -> None:
    out = tmp_path / "run"
    with served_rig(PROTOCOL, RIG, seed=4, faults=FaultPlan(stall_after={"source": 30})) as served:
        code, shown, err = run_served_with(served.write_rig(tmp_path / "served.yaml"), out)
        source = served.world.instruments["source"]
        left_on = source.output
    assert code == 1
    # The hung source never carried out the shutdown: it is still on, and the run says so.
    assert left_on is True
    failed = err.splitlines()[-1]  # after the cautions a run on instruments shows
    assert failed.startswith("failed: run ")
    assert ("safe state NOT verified: source: current at zero not read back (source: no reply "
            "within the 0.5 s timeout (during 'SOUR:CURR?'))") in failed
    assert "instruments left in the safe state" not in err + shown
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "failed" and status["safe_state_verified"] is False
    history = json.loads((out / "run.json").read_text())["history"]
    assert history[-1]["safe_state"].startswith("safe state NOT verified")


# -- stop signals during the safe shutdown ------------------------------------------------------
def test_only_the_first_stop_signal_interrupts() -> None:
    signals = StopSignals()
    with pytest.raises(Interrupted, match="SIGTERM"):
        signals.handle(signal.SIGTERM, None)
    for later in (signal.SIGTERM, signal.SIGINT, signal.SIGTERM):
        signals.handle(later, None)  # noted, never raised
    assert signals.received == ["SIGTERM", "SIGTERM", "SIGINT", "SIGTERM"]
    assert signals.note() == ("3 further stop signals (SIGINT, SIGTERM) during the safe "
                              "shutdown, noted and not acted on")
    signals.rearm()
    signals.handle(signal.SIGINT, None)  # a plan does not go on after a signal: still held


def long_socket_protocol(tmp_path: Path, points: int = 400) -> Path:
    (tmp_path / "base.yaml").write_text((ROOT / "protocols" / "base.yaml").read_text())
    path = tmp_path / "long.yaml"
    path.write_text(
        "extends: base.yaml\nname: long socket loop\nloops:\n"
        f"  - {{axis: current, start: 0.1 mA, stop: 2 mA, num: {points}}}\n"
        "alternation: {pattern: '+-', cycles: 2, settle: 5 ms}\n"
        "readings: {per_step: 1, channels: [vxx]}\n")
    return path


def start_cli(*argv: str) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "acquire.cli", *argv],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)


def wait_for_readings(out: Path, process: subprocess.Popen[str], rows: int,
                      timeout_s: float = 60.0) -> None:
    deadline = time.monotonic() + timeout_s
    readings = out / "readings.csv"
    while time.monotonic() < deadline and process.poll() is None:
        if readings.exists() and readings.read_text().count("\n") > rows:
            return
        time.sleep(0.02)
    raise AssertionError(f"no {rows} readings appeared: {process.poll()}")


@pytest.mark.parametrize("trial", range(4))
def test_signals_during_the_safe_shutdown_are_noted_and_the_source_is_left_safe(
    tmp_path: Path, trial: int
) -> None:
    protocol = long_socket_protocol(tmp_path, points=30)
    out = tmp_path / "run"
    # Every reply 20 ms late: the safe shutdown's read-back takes a while, and the signals
    # below (one every few ms from the first on, until the process has exited) land inside it.
    with served_rig(protocol, RIG, seed=4, faults=FaultPlan(delay_s=0.02)) as served:
        rig_file = served.write_rig(tmp_path / "served.yaml")
        process = start_cli("run", str(protocol), "--rig", str(rig_file), "--out", str(out),
                            "--quiet")
        wait_for_readings(out, process, 20 + 10 * trial)
        sent = 0
        deadline = time.monotonic() + 60.0
        while process.poll() is None and time.monotonic() < deadline:
            process.send_signal(signal.SIGTERM if sent % 2 == 0 else signal.SIGINT)
            sent += 1
            time.sleep(0.003 * (1 + trial % 2))
        stdout, stderr = process.communicate(timeout=60)
        source = served.world.instruments["source"]
        state = (source.level_A, source.output)
        status = json.loads((out / "status.json").read_text())
        history = json.loads((out / "run.json").read_text())["history"]
        if trial == 0:
            # Resume finishes the night, and says so in its closing line.
            resumed = run_cli(["resume", str(out), "--quiet"])
            assert resumed.code == 0, resumed.err
            assert "done; safe state verified" in resumed.out
            assert (source.level_A, source.output) == (0.0, False)
    assert process.returncode == 130, stderr
    assert "Traceback" not in stderr
    # Read from the simulated source itself: current zero, output off.
    assert state == (0.0, False)
    assert "safe state verified (source: current 0 mA, output off)" in stdout
    assert "during the safe shutdown, noted and not acted on" in stdout
    assert status["state"] == "interrupted" and status["safe_state_verified"] is True
    assert len(status["stop_signals"]) >= 2 and sent >= len(status["stop_signals"])
    assert [entry["event"] for entry in history] == ["start", "interrupted"]
    # SIGTERM is sent first, but when both are pending before the interpreter runs a handler,
    # CPython runs them in signal-number order, SIGINT (2) first (# from memory): either may
    # be the one acted on.
    assert history[-1]["reason"] in ("interrupted by SIGTERM", "interrupted by SIGINT")
    assert history[-1]["stop_signals"] == status["stop_signals"]


# -- kill -9 inside a long point ----------------------------------------------------------------
def test_kill_minus_nine_inside_a_long_point_keeps_its_readings_and_resume_completes(
    tmp_path: Path,
) -> None:
    (tmp_path / "base.yaml").write_text((ROOT / "protocols" / "base.yaml").read_text())
    protocol = tmp_path / "long_point.yaml"
    # One point of 120 cycles "+-" (240 readings of 1 NPLC, 5 ms settles): about 6 s, while
    # its rows reach the file every 2 s of run clock.
    protocol.write_text(
        "extends: base.yaml\nname: one long point\nloops:\n"
        "  - {axis: current, values: [1 mA]}\n"
        "alternation: {pattern: '+-', cycles: 120, settle: 5 ms}\n"
        "readings: {per_step: 1, channels: [vxx]}\n")
    out = tmp_path / "run"
    process = start_cli("run", str(protocol), "--rig", str(SIMULATED_RIG), "--simulate",
                        "--realtime", "--seed", "3", "--out", str(out), "--quiet")
    # Rows of the first point reach the file while it is still being measured.
    wait_for_readings(out, process, 30)
    process.send_signal(signal.SIGKILL)
    process.communicate(timeout=60)
    rows = pd.read_csv(out / "readings.csv")
    assert len(rows) >= 30 and set(rows["point"]) == {0}
    assert len(rows) < 240, "the point had finished: the kill was not inside it"
    points = (out / "points.csv").read_text().splitlines()
    assert len(points) == 1, "the first point is not done yet"
    result = run_cli(["resume", str(out), "--quiet"])
    assert result.code == 0, result.err
    assert "resuming from point 0 of 1" in result.out
    assert "done; safe state verified" in result.out
    aside = pd.read_csv(out / "readings.partial.csv")
    assert len(aside) == len(rows) and set(aside["point"]) == {0}  # kept, not lost
    final = pd.read_csv(out / "readings.csv")
    assert final.groupby("point").size().to_dict() == {0: 240}
    os.sync()
