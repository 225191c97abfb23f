"""Transient faults: what the served instruments inject, and how the runner lives through them
(retry with backoff and reconnect, flagged data, a safe and bounded stop when a fault persists).
"""

from __future__ import annotations

import json
import math
import random
import re
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from acquire.inputs.load import load_protocol, load_rig
from acquire.runtime.clock import RealClock
from acquire.runtime.instruments import Instruments
from acquire.runtime.runner import Runner
from acquire.runtime.serve import served_rig
from acquire.store.append_table import AppendTable
from drivers.errors import CommunicationError, InstrumentError
from drivers.replies import FlagReply, ScpiErrorReply
from drivers.roles.field import DialectFieldSupply
from sim_instruments.faults import (
    LINE_NOISE,
    Fault,
    FaultInjector,
    FaultPlan,
    garble,
    parse_stall,
)
from tests.conftest import SIMULATED_RIG, run_cli
from tests.test_socket_server import POINTS, PROTOCOL, RIG, assert_complete, run_served

# Short backoffs so that a real-clock run with faults takes seconds; the schedule's length (the
# number of retries) stays the default's.
TEST_BACKOFF_S = (0.01, 0.02, 0.05)
RETRY_LINE = re.compile(r"; retry (\d) of 2 in ")


@pytest.fixture
def short_backoff(monkeypatch: pytest.MonkeyPatch) -> None:
    assert len(Runner.retry_backoff_s) == len(TEST_BACKOFF_S)
    monkeypatch.setattr(Runner, "retry_backoff_s", TEST_BACKOFF_S)


def retry_lines(out: Path) -> list[str]:
    return [line for line in (out / "run.log").read_text().splitlines()
            if RETRY_LINE.search(line)]


# -- the injector on its own ---------------------------------------------------------------------
@pytest.mark.parametrize(("text", "expected"), [
    ("vxx@200", ("vxx", 200)), ("vxx", ("vxx", 0)), ("cryo@0", ("cryo", 0)),
])
def test_parse_stall(text: str, expected: tuple[str, int]) -> None:
    assert parse_stall(text) == expected


@pytest.mark.parametrize("text", ["@3", "vxx@", "vxx@x", "vxx@1.5"])
def test_parse_stall_refuses_malformed(text: str) -> None:
    with pytest.raises(ValueError):
        parse_stall(text)


def test_garbled_replies_stay_one_line_and_never_parse_as_a_value() -> None:
    rng = random.Random(1)
    flag = FlagReply("true=1,ON; false=0,OFF", ("1", "ON"), ("0", "OFF"))
    for reply in (b"+1.014521914E-05\n", b"1\n", b'0,"No error"\n', b"300.0\n", b"\n"):
        for _ in range(200):
            noisy = garble(reply, b"\n", rng)
            assert noisy.endswith(b"\n") and noisy.count(b"\n") == 1
            text = noisy[:-1].decode("ascii")
            assert len(text) >= 3 and set(noisy[:-1]) <= set(LINE_NOISE)
            with pytest.raises(ValueError):
                float(text)  # Python's own float parser, not the project's
            with pytest.raises(ValueError):
                flag.parse(text)
            with pytest.raises(ValueError):
                ScpiErrorReply().parse(text)


def test_fault_draws_are_reproducible_and_at_the_asked_rate() -> None:
    plan = FaultPlan.from_rates(fault_rate=0.03, drop_rate=0.02, seed=5)
    draws = 30_000

    def sequence() -> list[Fault]:
        injector = FaultInjector(plan, ["vxx"])
        return [injector.fault_for_reply("vxx", n) for n in range(draws)]

    first = sequence()
    assert first == sequence()
    for fault, rate in ((Fault.DROP, 0.03), (Fault.GARBLE, 0.01), (Fault.LATE, 0.01)):
        # Binomial: 5 standard deviations, sqrt(p (1 - p) / n), is < 1e-4 odds of a false alarm.
        assert abs(first.count(fault) / draws - rate) < 5 * math.sqrt(rate * (1 - rate) / draws)


def test_stall_after_n_transactions_then_answer_again() -> None:
    injector = FaultInjector(FaultPlan(stall_after={"vxx": 3}), ["vxx", "source"])
    assert [injector.next_transaction("vxx")[1] for _ in range(5)] == [
        False, False, False, True, True]
    assert injector.next_transaction("source") == (1, False)
    injector.answer_again("vxx")
    assert injector.next_transaction("vxx") == (6, False)
    injector.stall("vxx", after=1)
    assert [injector.next_transaction("vxx")[1] for _ in range(2)] == [False, True]


def test_fault_plan_problems() -> None:
    names = ["source", "vxx"]
    assert FaultPlan.from_rates(fault_rate=0.3, drop_rate=0.1).problems(names) == []
    assert FaultPlan(drop_rate=0.6, garble_rate=0.6).problems(names)
    assert FaultPlan(delay_s=-0.1).problems(names)
    assert FaultPlan(stall_after={"vyy": 1}).problems(names)


# -- the runner against served instruments that misbehave -----------------------------------------
# The fault seeds below were chosen so that the 20-point run meets faults of every kind after its
# start: `flipsweep run` asks each instrument for its identity before the runner exists, and a
# fault there is the session's to report, not the runner's to retry.
ONE_PERCENT_SEED = 0
DROP_SEED = 7


def test_one_percent_faults_are_retried_and_flagged(tmp_path: Path, short_backoff: None) -> None:
    out = tmp_path / "run"
    plan = FaultPlan.from_rates(fault_rate=0.01, seed=ONE_PERCENT_SEED)
    with served_rig(PROTOCOL, RIG, seed=4, faults=plan) as served:
        assert run_served(served, out, tmp_path) == 0
        events = list(served.faults.events)
    # The premise: faults of every kind were injected, after each instrument's identity query.
    assert {event.fault for event in events} == {Fault.DROP, Fault.GARBLE, Fault.LATE}
    assert all(event.transaction > 1 for event in events)
    # Each fault made the runner retry once, and said so.
    lines = retry_lines(out)
    assert len(lines) == len(events), lines
    assert any("KELV? A" in line for line in lines), "a readback fault"
    assert any("FETCH:VOLT?" in line for line in lines), "a voltmeter reading fault"
    points = assert_complete(out)
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    retried = {int(n) for line in lines for n in re.findall(r"point (\d+):", line)}
    flagged = set(points.loc[points["flags"].str.contains("retry"), "point"])
    assert retried and flagged == retried
    # The rows of the attempt that counts carry the flag too; the other points are clean.
    latest = readings[readings["attempt"] == readings.groupby("point")["attempt"].transform("max")]
    assert set(latest.loc[latest["flags"].str.contains("retry"), "point"]) == retried
    assert (points.loc[~points["point"].isin(retried), "flags"] == "").all()


def test_a_dropped_connection_is_reopened_and_the_run_goes_on(
    tmp_path: Path, short_backoff: None
) -> None:
    out = tmp_path / "run"
    plan = FaultPlan(drop_rate=0.01, seed=DROP_SEED)
    with served_rig(PROTOCOL, RIG, seed=4, faults=plan) as served:
        assert run_served(served, out, tmp_path) == 0
        dropped = [event.instrument for event in served.faults.events]
        accepted = {name: served.instruments[name].accepted for name in served.instruments}
    assert dropped and set(dropped) <= {"source", "vxx", "cryo"}
    for name in served.instruments:
        # One connection when the run opened the rig, one more per drop of that instrument.
        assert accepted[name] == 1 + dropped.count(name), (name, accepted, dropped)
    lines = retry_lines(out)
    assert len(lines) == len(dropped)
    assert all(f"after reconnecting {name}" in line for name, line in zip(dropped, lines))
    assert_complete(out)


def test_a_stalled_voltmeter_stops_the_run_safely_and_resume_completes_it(
    tmp_path: Path, short_backoff: None
) -> None:
    out = tmp_path / "run"
    with served_rig(PROTOCOL, RIG, seed=4, faults=FaultPlan(stall_after={"vxx": 40})) as served:
        started = time.monotonic()
        assert run_served(served, out, tmp_path) == 1
        elapsed = time.monotonic() - started
        # The safe state, read from the simulated source itself.
        assert served.world.instruments['source'].level_A == 0.0
        assert served.world.instruments['source'].output is False
        status = json.loads((out / "status.json").read_text())
        assert status["state"] == "failed"
        assert 0 < status["points_done"] < POINTS
        log = (out / "run.log").read_text()
        assert "vxx: no reply within the 0.5 s timeout" in log
        # Two retries of the call, the point measured again, two more retries: the sixth
        # failure in a row makes vxx silent.
        assert "still failing after 2 retries with reconnect; measuring point" in log
        assert "vxx stays silent (6 failed calls in a row" in log
        assert len(retry_lines(out)) == 4
        assert "safe state verified (source: current 0 mA, output off)" in log
        # Six timeouts of 0.5 s and the backoffs, plus the run's own second: well under 10 s.
        assert elapsed < 10.0
        served.answer_again("vxx")
        assert run_cli(["resume", str(out), "--quiet"]).code == 0
        # the finished run left it safe again
        assert served.world.instruments['source'].output is False
    assert_complete(out)
    assert json.loads((out / "status.json").read_text())["state"] == "done"


# -- faults during moves, on the virtual clock ----------------------------------------------------
def faulty_field_readback(
    monkeypatch: pytest.MonkeyPatch, failing_calls: Callable[[int], Exception | None]
) -> list[int]:
    """Make the field supply's readback fail on the calls `failing_calls` picks."""
    calls: list[int] = []
    original = DialectFieldSupply.field

    def field(self: DialectFieldSupply) -> float:
        calls.append(len(calls) + 1)
        error = failing_calls(len(calls))
        if error is not None:
            raise error
        return original(self)

    monkeypatch.setattr(DialectFieldSupply, "field", field)
    return calls


@pytest.fixture
def field_protocol(make_protocol: Callable[..., Path]) -> Path:
    return make_protocol("{axis: field, values: [0.1 T, 0.2 T]}",
                         "{axis: current, values: [1 mA]}",
                         alternation="{pattern: '+-', cycles: 2, settle: 1 ms}")


def simulate(protocol: Path, out: Path) -> int:
    return run_cli(["run", str(protocol), "--rig", str(SIMULATED_RIG), "--simulate", "--seed",
                    "1", "--out", str(out), "--quiet"]).code


def test_a_fault_during_a_move_repeats_the_move_and_flags_the_next_point(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, field_protocol: Path
) -> None:
    # A ten-minute backoff: on the virtual clock it costs no real time. (The magnet would count
    # as silent after failing for 600 s; the limit is raised out of the way.)
    monkeypatch.setattr(Runner, "retry_backoff_s", (600.0, 600.0, 600.0))
    monkeypatch.setattr(Runner, "silent_s", 1e6)
    faults = {3: CommunicationError("magnet", "FLD:NOW?", "no reply within the 5 s timeout"),
              4: InstrumentError("magnet", "FLD:NOW?", "unexpected reply: got '#~@'")}
    faulty_field_readback(monkeypatch, faults.get)
    out = tmp_path / "run"
    started = time.monotonic()
    assert simulate(field_protocol, out) == 0
    assert time.monotonic() - started < 60.0  # far below the 1200 s of backoff it rehearsed
    lines = retry_lines(out)
    assert len(lines) == 2
    assert all("move field to 0.1" in line and "reconnecting magnet" in line for line in lines)
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    assert points.set_index("point")["flags"].to_dict() == {0: "retry", 1: ""}
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    assert readings["time_s"].min() > 1200.0  # both backoffs passed on the run clock


def test_a_persistent_fault_during_a_move_stops_the_run(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, field_protocol: Path
) -> None:
    fault = CommunicationError("magnet", "FLD:NOW?", "no reply within the 5 s timeout")
    calls = faulty_field_readback(monkeypatch, lambda n: fault if n >= 3 else None)
    out = tmp_path / "run"
    assert simulate(field_protocol, out) == 1
    # Two good reads, then the first try and two retries, the move again, two more tries: the
    # sixth failure in a row (commands sent in between are no answer) makes the magnet silent.
    assert len(calls) == 2 + 6
    assert json.loads((out / "status.json").read_text())["state"] == "failed"
    log = (out / "run.log").read_text()
    assert "move field to 0.1: magnet: no reply" in log
    assert "magnet stays silent (6 failed calls in a row" in log


# -- the safe shutdown ---------------------------------------------------------------------------
class Recorder:
    """A stand-in instrument that records calls in a shared list; some calls misbehave."""

    def __init__(self, name: str, calls: list[tuple[str, str, Any]],
                 misbehave: dict[str, Callable[[], None]] | None = None) -> None:
        self.name = name
        self._calls = calls
        self._misbehave = misbehave or {}
        self.level_A = 1e-3  # as a run leaves it
        self.output = True

    def _record(self, method: str, value: Any = None) -> None:
        self._calls.append((self.name, method, value))
        if method in self._misbehave:
            self._misbehave[method]()

    def set_current(self, amperes: float) -> None:
        self._record("set_current", amperes)
        self.level_A = amperes

    def set_output(self, on: bool) -> None:
        self._record("set_output", on)
        self.output = on

    def read_current(self) -> float:
        self._record("read_current")
        return self.level_A

    def output_is_on(self) -> bool:
        self._record("output_is_on")
        return self.output

    def set_target(self, tesla: float) -> None:
        self._record("set_target", tesla)

    def set_setpoint(self, kelvin: float) -> None:
        self._record("set_setpoint", kelvin)

    def reconnect(self) -> None:
        self._record("reconnect")


@pytest.fixture
def release() -> Iterator[threading.Event]:
    """Lets a hanging stand-in go once the test is over, so no thread outlives it for long."""
    event = threading.Event()
    yield event
    event.set()


def runner_with(tmp_path: Path, protocol: Path, rig: Path, opened: dict[str, Any]) -> Runner:
    loaded = load_protocol(protocol)
    tables = {schema.file_name: AppendTable(tmp_path, schema) for schema in loaded.mode.tables()}
    loaded_rig = load_rig(rig)
    return Runner(loaded, loaded_rig, Instruments(loaded_rig.rig, opened), RealClock(), tables)


def test_shutdown_makes_the_current_safe_first(
    tmp_path: Path, make_protocol: Callable[..., Path]
) -> None:
    protocol = make_protocol("{axis: current, values: [1 mA]}",
                             finish="{current: off, field: zero, temperature: 290 K}")
    calls: list[tuple[str, str, Any]] = []
    instruments = {"source": Recorder("source", calls), "vxx": Recorder("vxx", calls),
                   "magnet": Recorder("magnet", calls), "cryo": Recorder("cryo", calls)}
    report = runner_with(tmp_path, protocol, SIMULATED_RIG, instruments).shutdown()
    assert report.ok and report.problems == []
    # The source made safe and read back before anything else is touched.
    assert calls == [("source", "set_current", 0.0), ("source", "set_output", False),
                     ("source", "read_current", None), ("source", "output_is_on", None),
                     ("magnet", "set_target", 0.0), ("cryo", "set_setpoint", 290.0)]
    assert report.summary() == "safe state verified (source: current 0 mA, output off)"


def test_shutdown_is_bounded_when_the_source_hangs_and_does_not_retry(
    tmp_path: Path, make_protocol: Callable[..., Path], release: threading.Event
) -> None:
    protocol = make_protocol("{axis: current, values: [1 mA]}",
                             finish="{current: off, temperature: 290 K}")
    calls: list[tuple[str, str, Any]] = []

    def refuse() -> None:
        raise CommunicationError("cryo", "SETP A,290.000", "Broken pipe")

    instruments = {
        "source": Recorder("source", calls, {"set_current": lambda: release.wait(30.0)}),
        "vxx": Recorder("vxx", calls),
        "cryo": Recorder("cryo", calls, {"set_setpoint": refuse}),
    }
    runner = runner_with(tmp_path, protocol, RIG, instruments)
    started = time.monotonic()
    report = runner.shutdown()
    problems = report.problems
    elapsed = time.monotonic() - started
    # The rig gives the source a 0.5 s timeout; the shutdown waits that plus its 0.5 s grace,
    # never the 30 s the source would hang.
    assert 1.0 <= elapsed < 5.0
    assert problems[0] == "current to zero: no answer from source within 1 s"
    assert problems[1] == "output off: skipped, source did not answer"
    assert problems[2] == "read back: current at zero: skipped, source did not answer"
    assert problems[3] == "read back: output off: skipped, source did not answer"
    assert problems[4].startswith("temperature setpoint: cryo: Broken pipe")
    # Each call made once: nothing more is sent to an instrument that did not answer.
    assert calls == [("source", "set_current", 0.0), ("cryo", "set_setpoint", 290.0)]
    # The truth, not a claim: neither the source nor the cryostat is known to be safe.
    assert not report.ok
    assert report.summary() == (
        "safe state NOT verified: source: current at zero not read back (source does not "
        "answer), output off not read back (source does not answer); cryo: safe-state calls "
        "failed (cryo: Broken pipe (during 'SETP A,290.000'))")


def test_shutdown_reopens_a_session_lost_in_a_failed_reconnect(
    tmp_path: Path, make_protocol: Callable[..., Path]
) -> None:
    protocol = make_protocol("{axis: current, values: [1 mA]}")
    calls: list[tuple[str, str, Any]] = []
    instruments = {"source": Recorder("source", calls), "vxx": Recorder("vxx", calls)}
    runner = runner_with(tmp_path, protocol, RIG, instruments)
    runner._disconnected.add("source")
    assert runner.shutdown().ok
    assert calls == [("source", "reconnect", None), ("source", "set_current", 0.0),
                     ("source", "set_output", False), ("source", "read_current", None),
                     ("source", "output_is_on", None)]
