"""A rig whose instruments speak other dialects, end to end: rig file -> generated pyvisa-sim
definitions in that dialect -> live simulation -> the same role drivers."""

from __future__ import annotations

from pathlib import Path

import pytest

from acquire.inputs.load import load_rig
from acquire.runtime.clock import VirtualClock
from drivers.errors import InstrumentError
from drivers.rig import Rig
from tests.test_drivers_support import OhmicSample, simulated

ODD_RIG = r"""
name: odd rig
visa_library: "@sim"
instruments:
  source:
    role: current_source
    resource: "GPIB0::1::INSTR"
    limits: {current: 10 mA}
    commands: {set_current: "CURR:LEV {value:.9g}", output_on: "OUTP:STAT 1"}
  vxx:
    role: voltmeter
    resource: "TCPIP0::192.0.2.7::5025::SOCKET"
    commands: {read: "FETCH:VOLT?"}
    replies: {read: 'V=([-+0-9.Ee]+)'}
  stage:
    role: rotator
    resource: "ASRL5::INSTR"
    read_termination: "\r"
    write_termination: "\r"
    commands:
      move: "MA {value:.1f}"
      position: "PA?"
      moving: "BUSY?"
      home: "ZERO"
      speed: "SPEED {value:.1f}"
      identify: "ID?"
      reset: ""
      clear_status: ""
      operation_complete: ""
      error_query: ""
    replies: {moving: "true=MOVING; false=STOPPED", rejected: "?"}
  magnet:
    role: field
    resource: "GPIB0::4::INSTR"
    limits: {field: 1 T, ramp_rate: 1 T/min}
    commands: {ramp_rate: "RAMP:RATE {per_minute:.6g}"}
"""


@pytest.fixture
def odd_rig(tmp_path: Path) -> Rig:
    path = tmp_path / "odd.yaml"
    path.write_text(ODD_RIG, encoding="utf-8")
    return load_rig(path).rig


def test_other_verbs_and_a_patterned_reply_work_through_the_drivers(odd_rig: Rig) -> None:
    with simulated(odd_rig, OhmicSample(resistance_ohm=500.0)) as (simulated_rig, drivers):
        drivers["source"].set_current(2e-3)
        drivers["source"].set_output(True)
        assert drivers["vxx"].read() == pytest.approx(1.0, rel=1e-6)  # 2 mA * 500 ohm
        # The instrument really answers in its own form, which the rig's pattern parses.
        raw = simulated_rig.resource_manager.open_resource(
            "TCPIP0::192.0.2.7::5025::SOCKET", read_termination="\n", write_termination="\n"
        )
        reply = raw.query("FETCH:VOLT?")
        raw.close()
        assert reply.startswith("V=")
        assert float(reply.removeprefix("V=")) == pytest.approx(1.0, rel=1e-6)


def test_the_default_verb_is_unknown_to_an_instrument_with_another(odd_rig: Rig) -> None:
    with simulated(odd_rig, OhmicSample()) as (simulated_rig, _):
        raw = simulated_rig.resource_manager.open_resource(
            "GPIB0::1::INSTR", read_termination="\n", write_termination="\n"
        )
        raw.write("SOUR:CURR 0.001")
        assert raw.query("SYST:ERR?") == '-113,"Undefined header"'
        raw.close()
        assert simulated_rig.world.instruments['source'].programmed_current() == 0.0


def test_a_serial_rotator_without_scpi(odd_rig: Rig) -> None:
    clock = VirtualClock()
    with simulated(odd_rig, OhmicSample(), clock) as (simulated_rig, drivers):
        stage = drivers["stage"]
        assert stage.identify() == "flipsweep-sim,rotator,stage,1.0"
        assert stage.errors() == []  # no error queue to read
        stage.configure(5.0)
        stage.move_to(90.0)
        assert stage.moving()
        clock.sleep(9.0)
        assert stage.position() == pytest.approx(45.0, abs=1e-9)  # 5 deg/s
        clock.sleep(9.1)
        assert not stage.moving()
        assert stage.position() == pytest.approx(90.0, abs=1e-9)
        raw = simulated_rig.resource_manager.open_resource(
            "ASRL5::INSTR", read_termination="\r", write_termination="\r"
        )
        raw.write("MA 10.0")
        assert raw.query("BUSY?") == "MOVING"
        raw.close()


def test_a_rejected_query_on_an_instrument_without_error_queue(odd_rig: Rig) -> None:
    asking = odd_rig.model_copy(deep=True)
    stage = asking.instruments["stage"]
    asking.instruments["stage"] = stage.model_copy(
        update={"commands": {**stage.commands, "position": "POS?"}}
    )
    with (
        simulated(odd_rig, OhmicSample(), driver_rig=asking) as (_, drivers),
        pytest.raises(InstrumentError) as raised,
    ):
        drivers["stage"].position()
    assert raised.value.command == "POS?"
    assert raised.value.message == "rejected the command"


def test_a_rate_given_per_minute(odd_rig: Rig) -> None:
    clock = VirtualClock()
    with simulated(odd_rig, OhmicSample(), clock) as (_, drivers):
        magnet = drivers["magnet"]
        magnet.configure(0.5 / 60)  # sent as 'RAMP:RATE 0.5' (T/min)
        magnet.set_target(0.5)
        clock.sleep(30.0)
        assert magnet.field() == pytest.approx(0.25, abs=1e-9)
