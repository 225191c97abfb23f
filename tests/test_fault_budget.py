"""The fault budget: retries per call (the protocol's `retries`), reset by an answer, and a
separate limit for an instrument that stays silent; then scattered faults over a served rig."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from acquire.runtime.fault_budget import (
    FaultBudget,
    InstrumentSilent,
    Retrying,
    TransactionFailed,
)
from acquire.runtime.runner import Runner
from acquire.runtime.serve import served_rig
from drivers.errors import CommunicationError, LimitError
from sim_instruments.faults import FaultPlan
from tests.conftest import run_cli
from tests.test_socket_server import KEY

FIXTURES = Path(__file__).resolve().parent / "protocols"
TIMEOUT = CommunicationError("vxx", "READ?", "no reply within the 0.5 s timeout")


class Clock:
    def __init__(self) -> None:
        self.t = 0.0

    def now(self) -> float:
        return self.t


class Meter:
    """Answers, or raises the next of a list of faults."""

    name = "vxx"

    def __init__(self, faults: list[Exception | None]) -> None:
        self.faults = list(faults)
        self.calls = 0

    def read(self) -> float:
        self.calls += 1
        fault = self.faults.pop(0) if self.faults else None
        if fault is not None:
            raise fault
        return 1.0

    def set_range(self, volts: float) -> None:  # a command: returns nothing
        self.calls += 1
        fault = self.faults.pop(0) if self.faults else None
        if fault is not None:
            raise fault


def budget_for(retries: int, clock: Clock, waits: list[tuple[float, list[str]]],
               **limits: Any) -> FaultBudget:
    def recover(seconds: float, names: list[str]) -> None:
        waits.append((seconds, names))
        clock.t += seconds

    return FaultBudget(retries=retries, now=clock.now, recover=recover,
                       backoff_s=(1.0, 4.0, 15.0), **limits)


def test_a_call_is_retried_up_to_the_protocols_retries_then_fails() -> None:
    waits: list[tuple[float, list[str]]] = []
    budget = budget_for(2, Clock(), waits)
    meter = Retrying(Meter([TIMEOUT, TIMEOUT]), budget)
    assert meter.read() == 1.0  # third try answers
    assert waits == [(1.0, ["vxx"]), (4.0, ["vxx"])]  # backoff grows with the run of failures
    failing = Retrying(Meter([TIMEOUT] * 3), budget)
    with pytest.raises(TransactionFailed, match="still failing after 2 retries") as caught:
        failing.read()
    assert caught.value.instrument == "vxx"


def test_the_budget_is_per_call_and_an_answer_resets_the_run_of_failures() -> None:
    waits: list[tuple[float, list[str]]] = []
    budget = budget_for(2, Clock(), waits, silent_failures=4)
    # Two failures, an answer, two failures, an answer...: never three calls' worth in a row.
    meter = Retrying(Meter([TIMEOUT, TIMEOUT, None] * 5), budget)
    for _ in range(5):
        assert meter.read() == 1.0
    assert budget.faults == 10
    assert [seconds for seconds, _ in waits] == [1.0, 4.0] * 5


def test_an_instrument_failing_many_calls_in_a_row_is_silent() -> None:
    waits: list[tuple[float, list[str]]] = []
    budget = budget_for(2, Clock(), waits, silent_failures=6)
    meter = Retrying(Meter([TIMEOUT] * 3 + [None] + [TIMEOUT] * 10), budget)
    with pytest.raises(TransactionFailed):
        meter.read()  # failures 1-3
    meter.set_range(1.0)  # a command gets through to a hung instrument: that is no answer
    with pytest.raises(InstrumentSilent, match=r"vxx stays silent \(6 failed calls in a row"):
        meter.read()  # failures 4, 5, 6


def test_an_instrument_failing_for_the_silent_time_is_silent() -> None:
    waits: list[tuple[float, list[str]]] = []
    clock = Clock()
    budget = budget_for(10, clock, waits, silent_failures=100, silent_s=30.0)
    meter = Retrying(Meter([TIMEOUT] * 10), budget)
    # Backoffs 1 + 4 + 15 + 15 = 35 s: the fifth failure comes 35 s after the first.
    with pytest.raises(InstrumentSilent, match=r"5 failed calls in a row over 35 s"):
        meter.read()


def test_a_refused_value_is_never_retried() -> None:
    waits: list[tuple[float, list[str]]] = []
    budget = budget_for(2, Clock(), waits)
    meter = Retrying(Meter([LimitError("vxx", "RANGE 1e3", "past the limit")]), budget)
    with pytest.raises(LimitError):
        meter.set_range(1e3)
    assert waits == [] and budget.faults == 0


# -- scattered faults over the served rig --------------------------------------------------------
SHORT_BACKOFF_S = (0.01, 0.02, 0.05)  # real-clock test: the count of retries is what matters
RETRY = re.compile(r"point (\d+): .*; retry \d of 2 in ")
AGAIN = re.compile(r"point (\d+): .*still failing after 2 retries with reconnect; measuring point")


def fast_rig(tmp_path: Path) -> Path:
    """The socket test rig with 0.2 s timeouts, so that a late reply costs little."""
    text = (FIXTURES / "socket_rig.yaml").read_text().replace("timeout: 0.5 s", "timeout: 0.2 s")
    path = tmp_path / "fast_rig.yaml"
    path.write_text(text)
    return path


def many_points_protocol(tmp_path: Path, points: int) -> Path:
    base = (Path(__file__).resolve().parents[1] / "protocols" / "base.yaml").read_text()
    (tmp_path / "base.yaml").write_text(base)
    path = tmp_path / f"loop_{points}.yaml"
    path.write_text(
        "extends: base.yaml\n"
        f"name: socket loop of {points} points\n"
        "loops:\n"
        f"  - {{axis: current, start: 0.1 mA, stop: 2 mA, num: {points}}}\n"
        "alternation: {pattern: '+-', cycles: 2, settle: 1 ms}\n"
        "readings: {per_step: 1, channels: [vxx]}\n")
    return path


def fault_trial(tmp_path: Path, points: int, rate: float, seed: int) -> dict[str, Any]:
    """One run over the served rig at a fault rate: what happened, from the files and server."""
    protocol = many_points_protocol(tmp_path, points)
    rig = fast_rig(tmp_path)
    out = tmp_path / f"run_{seed}"
    with served_rig(protocol, rig, seed=seed,
                    faults=FaultPlan.from_rates(fault_rate=rate, seed=seed)) as served:
        rig_file = served.write_rig(tmp_path / f"served_{seed}.yaml")
        result = run_cli(["run", str(protocol), "--rig", str(rig_file), "--out", str(out),
                          "--quiet"])
        injected = len(served.faults.events)
        source = served.world.instruments["source"]
        safe = (source.level_A, source.output)
    log = (out / "run.log").read_text()
    points_table = pd.read_csv(out / "points.csv", keep_default_na=False)
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    # Each fault shows once: as a retry, as the last failure of a call out of retries, or as
    # a read-back of the safe shutdown that got no answer.
    noticed = (len(re.findall(r"; retry \d of \d in ", log))
               + log.count("still failing after") + log.count("safe shutdown: read back"))
    return {"code": result.code, "out": result.out, "err": result.err, "log": log,
            "points": points_table, "readings": readings, "injected": injected,
            "noticed": noticed, "safe": safe,
            "hit": {int(n) for n in RETRY.findall(log)} | {int(n) for n in AGAIN.findall(log)}}


def assert_trial_complete(trial: dict[str, Any], points: int) -> None:
    assert trial["code"] == 0, trial["err"]
    table, readings = trial["points"], trial["readings"]
    assert sorted(table["point"]) == list(range(points)), "a point is missing or twice"
    assert not readings.duplicated(KEY).any(), "a reading was written twice"
    latest = readings[readings["attempt"] == readings.groupby("point")["attempt"]
                      .transform("max")]
    assert (latest.groupby("point").size() == 4).all()
    flagged = set(table.loc[table["flags"].str.contains("retry"), "point"])
    assert trial["hit"] <= flagged, "a point hit by a fault is not flagged"
    # Every injected fault was met and said so in the log (none passed unnoticed).
    assert trial["noticed"] == trial["injected"]
    assert trial["safe"] == (0.0, False)
    assert "safe state verified" in trial["out"]


def test_five_percent_faults_over_a_served_rig_lose_no_point(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(Runner, "retry_backoff_s", SHORT_BACKOFF_S)
    trial = fault_trial(tmp_path, 60, 0.05, seed=3)
    # The premise: dozens of faults, so that the old whole-point budget would have ended it.
    assert trial["injected"] >= 20
    assert_trial_complete(trial, 60)
