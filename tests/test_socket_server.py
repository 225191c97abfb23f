"""The simulated rig served as raw SCPI over loopback TCP, used through pyvisa-py like LAN
instruments: identity, dialects, the written rig file, a full real-clock run, `flipsweep serve`.
"""

from __future__ import annotations

import json
import os
import queue
import re
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
import pyvisa
import yaml

from acquire.errors import InputError
from acquire.inputs.load import load_protocol, load_rig
from acquire.runtime.serve import served_rig
from acquire.runtime.simulation import sample_for
from sim_instruments.faults import FaultPlan
from sim_instruments.socket_server import SocketRig
from tests.conftest import run_cli

ROOT = Path(__file__).resolve().parents[1]
FIXTURES = Path(__file__).resolve().parent / "protocols"
PROTOCOL = FIXTURES / "socket_current_loop.yaml"
RIG = FIXTURES / "socket_rig.yaml"
POINTS = 20  # the protocol's current loop
CYCLES, STEPS = 2, 2  # alternation "+-" x 2, one reading per step, one channel
ROWS_PER_POINT = CYCLES * STEPS
KEY = ["point", "attempt", "channel", "cycle", "step", "repeat"]
# Long enough for a loaded two-core machine to start a Python process and bind its ports.
SERVE_START_TIMEOUT_S = 30.0
SERVE_STOP_TIMEOUT_S = 10.0


def open_served(resource: str, timeout_s: float = 2.0) -> pyvisa.resources.MessageBasedResource:
    manager = pyvisa.ResourceManager("@py")
    return manager.open_resource(resource, read_termination="\n", write_termination="\n",
                                 timeout=round(timeout_s * 1000))


@pytest.fixture
def served() -> Iterator[SocketRig]:
    with served_rig(PROTOCOL, RIG, seed=4) as rig:
        yield rig


def run_served(rig: SocketRig, out: Path, tmp_path: Path) -> int:
    """`flipsweep run` in this process against the rig file the server writes."""
    rig_file = rig.write_rig(tmp_path / "served_rig.yaml")
    return run_cli(["run", str(PROTOCOL), "--rig", str(rig_file), "--out", str(out),
                    "--quiet"]).code


def assert_complete(out: Path) -> pd.DataFrame:
    """Every point once in points.csv; its latest attempt complete in readings.csv."""
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    assert not readings.duplicated(KEY).any(), "a reading was written twice"
    latest = readings[readings["attempt"] == readings.groupby("point")["attempt"]
                      .transform("max")]
    counts = latest.groupby("point").size()
    assert sorted(counts.index) == list(range(POINTS))
    assert (counts == ROWS_PER_POINT).all()
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    assert sorted(points["point"]) == list(range(POINTS)), "a point is missing or twice"
    return points


def true_resistance_ohm(current_A: float) -> float:
    """The sample model's expected even part, rebuilt from the protocol and the rig file."""
    model = sample_for(load_protocol(PROTOCOL), load_rig(RIG), seed=0)
    model.apply_field(0.0, 0.0)  # the served world starts at 0 T, 0 deg
    return float(model.expected("longitudinal", current_A, 300.0).resistance_ohm)


def test_served_instruments_answer_identity_and_their_own_dialect(served: SocketRig) -> None:
    for name, role in (("source", "current_source"), ("vxx", "voltmeter"),
                       ("cryo", "temperature")):
        assert re.fullmatch(r"TCPIP0::127\.0\.0\.1::\d+::SOCKET", served.resources[name])
        instrument = open_served(served.resources[name])
        try:
            # The identity the simulated definitions give (sim_instruments/pyvisa_sim_definitions).
            assert instrument.query("*IDN?") == f"flipsweep-sim,{role},{name},1.0"
        finally:
            instrument.close()
    vxx = open_served(served.resources["vxx"])
    cryo = open_served(served.resources["cryo"])
    try:
        # The rig overrides the voltmeter's read command and reply, and the controller's query:
        # the served instruments answer those, and reject the generic dialect's commands.
        assert re.fullmatch(r"V=[-+0-9.Ee]+", vxx.query("FETCH:VOLT?"))
        assert vxx.query("READ?") == "ERROR"
        assert float(cryo.query("KELV? A")) == pytest.approx(300.0)  # the rig's start temperature
        assert cryo.query("TEMP:NOW?") == "ERROR"
        # SCPI-99: the rejected query left "-113,Undefined header" in the error queue.
        assert cryo.query("SYST:ERR?").startswith("-113,")
    finally:
        vxx.close()
        cryo.close()


def test_written_rig_is_the_input_rig_with_served_addresses(served: SocketRig,
                                                            tmp_path: Path) -> None:
    written = yaml.safe_load(served.write_rig(tmp_path / "served.yaml").read_text())
    expected = yaml.safe_load(RIG.read_text())
    expected["visa_library"] = "@py"
    for name, resource in served.resources.items():
        expected["instruments"][name]["resource"] = resource
    assert written == expected
    ports = [int(resource.split("::")[2]) for resource in served.resources.values()]
    assert len(set(ports)) == len(ports)
    assert load_rig(tmp_path / "served.yaml").rig.visa_library == "@py"  # a valid rig file


def test_full_run_against_the_served_rig(served: SocketRig, tmp_path: Path) -> None:
    out = tmp_path / "run"
    assert run_served(served, out, tmp_path) == 0
    points = assert_complete(out)
    assert (points["flags"] == "").all()
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "done" and status["points_done"] == POINTS
    identities = json.loads((out / "run.json").read_text())["instruments"]
    assert identities["vxx"] == "flipsweep-sim,voltmeter,vxx,1.0"
    # The physics came through the sockets in the order it was sent: a voltmeter that read
    # before the source had applied the current would give half the resistance or less.
    for row in points.itertuples():
        # 2e-3 relative: the model's noise at 0.01 NPLC averaged over two cycles is below
        # 1e-4 of R at these currents; the margin covers the thermal drift of the real clock.
        assert row.resistance_ohm == pytest.approx(true_resistance_ohm(row.current_A), rel=2e-3)
    # The run left the source safe.
    source = served.world.instruments["source"]
    assert source.output is False and source.level_A == 0.0


def test_a_busy_port_is_an_input_error(served: SocketRig) -> None:
    taken = int(served.resources["source"].split("::")[2])
    second = served_rig(PROTOCOL, RIG, port_base=taken)
    try:
        with pytest.raises(InputError, match=f"cannot listen on 127.0.0.1:{taken}"):
            second.start()
    finally:
        second.close()


def test_server_binds_loopback_only(served: SocketRig) -> None:
    port = int(served.resources["vxx"].split("::")[2])
    outward = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        # No packet is sent: connecting a UDP socket only picks the outward interface.
        outward.connect(("192.0.2.1", 9))  # TEST-NET-1 (RFC 5737), never routed
        address = outward.getsockname()[0]
    except OSError:
        pytest.skip("no interface other than loopback")
    finally:
        outward.close()
    if address.startswith("127."):
        pytest.skip("no interface other than loopback")
    probe = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    probe.settimeout(2.0)
    try:
        with pytest.raises(OSError):
            probe.connect((address, port))
    finally:
        probe.close()


@pytest.mark.parametrize(("options", "message"), [
    (["--fault-rate", "1.5"], "--fault-rate"),
    (["--drop-rate", "0.7", "--garble-rate", "0.7"], "add up to"),
    (["--stall", "vyy@3"], "'vyy' is not an instrument"),
    (["--stall", "vxx@many"], "whole number"),
    (["--delay", "-1"], "--delay"),
])
def test_serve_rejects_bad_options(options: list[str], message: str) -> None:
    result = run_cli(["serve", str(RIG), "--protocol", str(PROTOCOL), "--port-base", "0",
                      *options])
    assert result.code == 2
    assert message in result.err


class LineReader:
    """A process's stdout lines, read by a thread (a pipe's readline would block the test)."""

    def __init__(self, process: subprocess.Popen[str]) -> None:
        assert process.stdout is not None
        stdout = process.stdout
        self.lines: list[str] = []
        self._arrived: queue.Queue[str] = queue.Queue()
        threading.Thread(target=lambda: [self._arrived.put(line.rstrip("\n"))
                                         for line in iter(stdout.readline, "")],
                         daemon=True).start()

    def until(self, marker: str, timeout_s: float) -> list[str]:
        deadline = time.monotonic() + timeout_s
        while (left := deadline - time.monotonic()) > 0:
            try:
                line = self._arrived.get(timeout=left)
            except queue.Empty:
                break
            self.lines.append(line)
            if marker in line:
                return self.lines
        raise AssertionError(f"no {marker!r} from flipsweep serve; got {self.lines}")


@pytest.mark.parametrize("stop_signal", [signal.SIGINT, signal.SIGTERM])
def test_serve_command_serves_then_stops_cleanly_on_a_signal(
    tmp_path: Path, stop_signal: signal.Signals
) -> None:
    rig_file = tmp_path / "served.yaml"
    process = subprocess.Popen(
        [sys.executable, "-m", "acquire.cli", "serve", str(RIG), "--protocol", str(PROTOCOL),
         "--port-base", "0", "--write-rig", str(rig_file)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT,
        env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )
    try:
        stdout = LineReader(process)
        lines = stdout.until("serving; Ctrl-C to stop", SERVE_START_TIMEOUT_S)
        listed = {line.split()[0]: line.split() for line in lines if "TCPIP0::" in line}
        assert set(listed) == {"source", "vxx", "cryo"}
        assert listed["vxx"][1] == "voltmeter"
        resource = yaml.safe_load(rig_file.read_text())["instruments"]["vxx"]["resource"]
        assert listed["vxx"][2] == resource
        vxx = open_served(resource)
        try:
            assert vxx.query("*IDN?") == "flipsweep-sim,voltmeter,vxx,1.0"
        finally:
            vxx.close()
        process.send_signal(stop_signal)
        process.wait(timeout=SERVE_STOP_TIMEOUT_S)
        assert process.stderr is not None
        err = process.stderr.read()
    finally:
        if process.poll() is None:
            process.kill()
            process.communicate()
    assert process.returncode == 0, err
    assert stdout.until("stopped", SERVE_STOP_TIMEOUT_S)
    assert "Traceback" not in err
    port = int(resource.split("::")[2])
    with pytest.raises(ConnectionRefusedError):  # the port is free again
        socket.create_connection(("127.0.0.1", port), 2).close()


def test_delay_is_added_to_every_reply(tmp_path: Path) -> None:
    delay_s = 0.2
    with served_rig(PROTOCOL, RIG, faults=FaultPlan(delay_s=delay_s)) as rig:
        vxx = open_served(rig.resources["vxx"])
        try:
            started = time.monotonic()
            for _ in range(3):
                vxx.query("*IDN?")
            elapsed = time.monotonic() - started
        finally:
            vxx.close()
    # Three replies, each at least `delay_s` late; an undelayed query takes ~0.1 ms, so one
    # extra second covers any scheduling hiccup.
    assert 3 * delay_s <= elapsed < 3 * delay_s + 1.0
