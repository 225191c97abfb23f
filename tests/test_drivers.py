"""The role drivers against the generated pyvisa-sim rig coupled to the simulated world."""

from __future__ import annotations

import math

import pytest

from acquire.runtime.clock import VirtualClock
from acquire.runtime.visa_library import resource_manager_for
from drivers.errors import CommunicationError, InstrumentError
from drivers.factory import open_instruments
from sim_instruments.sample_model import BilayerSample, SampleParameters
from tests.test_drivers_support import OhmicSample, make_rig, simulated, standard_instruments

# The drivers send values with 9 significant digits and the simulated instruments answer
# with 10: anything that should be exact agrees to ~1e-9 relative.
EXACT = 1e-8


def test_every_instrument_identifies_itself_without_a_maker() -> None:
    with simulated(make_rig(), OhmicSample()) as (_, drivers):
        identities = {name: driver.identify() for name, driver in drivers.items()}
    assert identities["source"] == "flipsweep-sim,current_source,source,1.0"
    assert identities["stage"] == "flipsweep-sim,rotator,stage,1.0"
    assert all(text.startswith("flipsweep-sim,") for text in identities.values())


def test_voltmeter_reading_follows_the_current() -> None:
    with simulated(make_rig(), OhmicSample(resistance_ohm=1000.0)) as (_, drivers):
        source, meter = drivers["source"], drivers["vxx"]
        source.configure(10.0)
        meter.configure(1.0, None, False)
        source.set_current(1e-3)
        assert meter.read() == pytest.approx(0.0, abs=1e-12)  # output still off
        source.set_output(True)
        assert meter.read() == pytest.approx(1.0, rel=EXACT)  # 1 mA * 1 kohm
        source.set_current(-2.5e-3)
        assert meter.read() == pytest.approx(-2.5, rel=EXACT)
        assert source.read_current() == pytest.approx(-2.5e-3, rel=EXACT)
        assert not source.compliance_tripped()


def test_real_sample_model_reads_its_resistance_from_geometry() -> None:
    # By hand from the demo stack: sheet conductances 2 nm / 150 uohm cm = 1.3333e-3 S and
    # 5 nm / 120 uohm cm = 4.1667e-3 S, sum 5.5e-3 S; R = (40 um / 4 um) / 5.5e-3 S
    # = 1818.18 ohm. Tolerance 0.5 %: AMR/SMR (< 0.15 %), Joule heating at 1 mA (0.14 %),
    # thermoelectric offset (10 uV / 1.8 V) and noise (< 1e-6) all fit well inside it.
    sample = BilayerSample(SampleParameters(), seed=3)
    with simulated(make_rig(), sample) as (_, drivers):
        drivers["source"].set_current(1e-3)
        drivers["source"].set_output(True)
        drivers["vxx"].configure(1.0, None, True)
        assert drivers["vxx"].read() / 1e-3 == pytest.approx(1818.18, rel=5e-3)


def test_compliance_trips_when_the_load_needs_more_voltage() -> None:
    with simulated(make_rig(), OhmicSample(resistance_ohm=1000.0)) as (_, drivers):
        source, meter = drivers["source"], drivers["vxx"]
        source.configure(1.0)  # 1 V over 1 kohm allows 1 mA
        source.set_output(True)
        source.set_current(0.9e-3)
        assert not source.compliance_tripped()
        source.set_current(2e-3)
        assert source.compliance_tripped()
        # In compliance the source holds 1 V: 1 mA flows, not the 2 mA asked for.
        assert meter.read() == pytest.approx(1.0, rel=EXACT)


def test_a_reading_lets_its_integration_time_pass() -> None:
    clock = VirtualClock()
    sample = OhmicSample()
    with simulated(make_rig(), sample, clock) as (_, drivers):
        meter = drivers["vxx"]
        meter.configure(2.0, None, True)
        start = clock.now()
        meter.read()
        # 2 power-line cycles at 50 Hz = 40 ms, doubled by autozero, plus the default
        # 2 ms transaction latency of a rig instrument.
        assert clock.now() - start == pytest.approx(0.082, rel=1e-12)
        # The signal itself still integrates 40 ms; the zero reading adds noise, not averaging.
        assert sample.readings[-1]["integration_s"] == pytest.approx(0.040, rel=1e-12)
        assert sample.readings[-1]["autozero"] is True
        meter.configure(1.0, None, False)
        start = clock.now()
        meter.read()
        assert clock.now() - start == pytest.approx(0.022, rel=1e-12)
        assert sample.readings[-1]["integration_s"] == pytest.approx(0.020, rel=1e-12)
        assert sample.readings[-1]["autozero"] is False


def test_each_voltmeter_reads_its_probe() -> None:
    sample = OhmicSample()
    with simulated(make_rig(), sample) as (_, drivers):
        drivers["vxx"].read()
        drivers["vxy"].read()
    assert [r["probe"] for r in sample.readings] == ["longitudinal", "transverse"]


def test_reading_beyond_a_fixed_range_is_an_instrument_error() -> None:
    with simulated(make_rig(), OhmicSample(resistance_ohm=1000.0)) as (_, drivers):
        drivers["source"].set_output(True)
        drivers["source"].set_current(1e-3)  # 1 V
        drivers["vxx"].configure(1.0, 0.1, False)
        with pytest.raises(InstrumentError, match="beyond the range") as raised:
            drivers["vxx"].read()
        assert raised.value.instrument == "vxx"


def test_field_ramp_takes_its_time_at_the_ramp_rate() -> None:
    clock = VirtualClock()
    with simulated(make_rig(), OhmicSample(), clock) as (_, drivers):
        magnet = drivers["magnet"]
        magnet.configure(0.5 / 60)  # 0.5 T/min
        magnet.set_target(0.2)
        assert magnet.field() == 0.0
        clock.sleep(12.0)
        # 12 s at 0.5 T/min = 0.1 T; the rate travels as 6 digits (8.33333e-3), 4e-7 relative.
        assert magnet.field() == pytest.approx(0.1, abs=1e-6)
        clock.sleep(11.9)
        assert magnet.field() < 0.2
        clock.sleep(0.2)
        assert magnet.field() == pytest.approx(0.2, abs=1e-9)
        magnet.set_target(-0.2)  # through zero, 0.4 T in 48 s
        clock.sleep(36.0)
        assert magnet.field() == pytest.approx(-0.1, abs=1e-6)


def test_voltmeter_reading_places_the_sample_in_the_present_field_and_angle() -> None:
    clock = VirtualClock()
    sample = OhmicSample()
    with simulated(make_rig(), sample, clock) as (_, drivers):
        drivers["vxx"].read()
        drivers["magnet"].configure(1.0 / 60)
        drivers["magnet"].set_target(0.5)
        drivers["stage"].move_to(30.0)
        clock.sleep(60.0)
        drivers["vxx"].read()
        drivers["vxx"].read()
    assert sample.placements[-1] == pytest.approx((0.5, 30.0), abs=1e-6)
    # Unchanged field and angle are not placed again (the costly part of the sample model).
    assert len(sample.placements) == 2  # the initial (0, 0), then (0.5, 30)


def test_rotator_reports_moving_until_it_arrives() -> None:
    clock = VirtualClock()
    with simulated(make_rig(), OhmicSample(), clock) as (_, drivers):
        stage = drivers["stage"]
        stage.configure(10.0)
        stage.move_to(90.0)
        assert stage.moving()
        clock.sleep(4.5)
        assert stage.position() == pytest.approx(45.0, abs=1e-9)
        clock.sleep(4.4)
        assert stage.moving()
        clock.sleep(0.2)
        assert not stage.moving()
        assert stage.position() == pytest.approx(90.0, abs=1e-9)
        stage.home()
        clock.sleep(9.1)
        assert stage.position() == 0.0


def test_temperature_ramps_then_settles_exponentially() -> None:
    clock = VirtualClock()
    with simulated(make_rig(), OhmicSample(), clock) as (_, drivers):
        cryo = drivers["cryo"]
        cryo.configure(2.0 / 60)  # 2 K/min
        assert cryo.temperature() == pytest.approx(300.0)
        cryo.set_setpoint(290.0)
        # With a 30 s time constant the ramp limit holds while more than rate * tau = 1 K
        # away: a straight line for (10 K - 1 K) / (1/30 K/s) = 270 s...
        clock.sleep(135.0)
        assert cryo.temperature() == pytest.approx(295.5, abs=1e-4)
        clock.sleep(135.0)
        assert cryo.temperature() == pytest.approx(291.0, abs=1e-4)
        # ...then 1 K * exp(-t / 30 s). The rate travels as 6 digits (3.33333e-2 K/s):
        # < 1e-5 K after 270 s.
        clock.sleep(30.0)
        assert cryo.temperature() == pytest.approx(290.0 + math.exp(-1.0), abs=1e-4)
        clock.sleep(600.0)
        assert cryo.temperature() == pytest.approx(290.0, abs=1e-6)


def test_start_temperature_from_the_rigs_simulation_setting() -> None:
    rig = make_rig(simulation={"start_temperature_K": 10.0})
    with simulated(rig, OhmicSample()) as (_, drivers):
        assert drivers["cryo"].temperature() == pytest.approx(10.0)


def test_current_beyond_the_rigs_limit_is_refused_before_sending() -> None:
    with simulated(make_rig(), OhmicSample()) as (simulated_rig, drivers):
        with pytest.raises(InstrumentError, match="limit") as raised:
            drivers["source"].set_current(25e-3)  # the rig allows 20 mA
        assert raised.value.instrument == "source"
        assert simulated_rig.world.instruments['source'].programmed_current() == 0.0
        with pytest.raises(InstrumentError, match="limit"):
            drivers["magnet"].set_target(2.5)  # the rig allows 2 T


def test_reset_turns_the_output_off() -> None:
    with simulated(make_rig(), OhmicSample()) as (simulated_rig, drivers):
        drivers["source"].set_current(1e-3)
        drivers["source"].set_output(True)
        drivers["source"].reset()
        assert simulated_rig.world.instruments['source'].applied_current() == 0.0
        assert drivers["source"].errors() == []


def test_unknown_command_fails_configuration_with_the_instruments_message() -> None:
    # The rig file says the source takes 'SOUR:VOLT:LIMIT'; the instrument does not know it.
    wrong = standard_instruments()
    wrong["source"]["commands"] = {"compliance": "SOUR:VOLT:LIMIT {value:.6g}"}
    with simulated(make_rig(), OhmicSample(), driver_rig=make_rig(wrong)) as (_, drivers):
        with pytest.raises(InstrumentError) as raised:
            drivers["source"].configure(10.0)
        assert raised.value.instrument == "source"
        assert "SOUR:VOLT:LIMIT 10" in raised.value.command
        # SCPI-99 vol. 1, error -113 "Undefined header": the queue entry as the instrument
        # wrote it.
        assert raised.value.message == '-113,"Undefined header"'
        # The queue is drained: the same instrument goes on answering in step.
        assert drivers["source"].errors() == []
        assert drivers["source"].identify().startswith("flipsweep-sim,")


def test_unknown_query_is_rejected_and_the_queue_says_why() -> None:
    wrong = standard_instruments()
    wrong["vxx"]["commands"] = {"read": "MEAS:VOLT?"}
    with simulated(make_rig(), OhmicSample(), driver_rig=make_rig(wrong)) as (_, drivers):
        with pytest.raises(InstrumentError) as raised:
            drivers["vxx"].read()
        assert raised.value.command == "MEAS:VOLT?"
        assert raised.value.message == '-113,"Undefined header"'


def test_no_reply_within_the_timeout_is_a_communication_error() -> None:
    # An instrument that says nothing to a query it does not know: the read times out.
    silent = standard_instruments()
    silent["vxx"].update(replies={"rejected": ""}, timeout="50 ms")
    asking = standard_instruments()
    asking["vxx"].update(replies={"rejected": ""}, timeout="50 ms",
                         commands={"read": "MEAS:VOLT?"})
    rigs = {"rig": make_rig(silent), "driver_rig": make_rig(asking)}
    with simulated(rigs["rig"], OhmicSample(), driver_rig=rigs["driver_rig"]) as (_, drivers):
        with pytest.raises(CommunicationError, match="timeout") as raised:
            drivers["vxx"].read()
        assert raised.value.instrument == "vxx"
        assert raised.value.command == "MEAS:VOLT?"


def test_socket_faults_are_communication_errors_and_reconnect_recovers() -> None:
    class DroppedConnection:
        def write(self, text: str) -> None:
            raise ConnectionResetError("peer closed the connection")

        def query(self, text: str) -> str:
            raise ConnectionResetError("peer closed the connection")

        def close(self) -> None:
            pass

    with simulated(make_rig(), OhmicSample()) as (_, drivers):
        meter = drivers["vxx"]
        meter.transport._session = DroppedConnection()
        with pytest.raises(CommunicationError, match="ConnectionResetError"):
            meter.read()
        meter.reconnect()
        assert meter.read() == 0.0
        meter.close()
        with pytest.raises(CommunicationError, match="closed"):
            meter.read()


def test_static_instruments_answer_unknown_commands_and_the_driver_keeps_in_step() -> None:
    # Plain pyvisa-sim definitions reply ERROR even to an unknown command (no '?'): the
    # reply waits in the output queue ahead of the error query's answer.
    wrong = standard_instruments()
    wrong["source"]["commands"] = {"compliance": "SOUR:VOLT:LIMIT {value:.6g}"}
    manager = resource_manager_for("@sim", make_rig())
    drivers = open_instruments(make_rig(wrong), manager)
    try:
        with pytest.raises(InstrumentError) as raised:
            drivers["source"].configure(10.0)
        assert raised.value.message == '-113,"Undefined header"'
        assert drivers["source"].errors() == []
        assert drivers["source"].identify() == "flipsweep-sim,current_source,source,1.0"
    finally:
        for driver in drivers.values():
            driver.close()
        manager.close()
