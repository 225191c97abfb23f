"""Closed-form motion of the simulated field, angle and temperature, against hand values."""

from __future__ import annotations

import math

import pytest

from sim_instruments.motion import LinearRamp, ThermalApproach


def test_linear_ramp_travels_at_its_rate_then_holds() -> None:
    ramp = LinearRamp(start=0.0, start_time=10.0, target=-1.0, rate=0.25)
    assert ramp.value(10.0) == 0.0
    assert ramp.value(12.0) == pytest.approx(-0.5)
    assert not ramp.arrived(13.9)
    assert ramp.value(14.0) == -1.0
    assert ramp.value(1e6) == -1.0


def test_linear_ramp_retargeted_midway_starts_from_where_it_is() -> None:
    ramp = LinearRamp(start=0.0, start_time=0.0, target=10.0, rate=1.0)
    ramp.retarget(4.0, 0.0)
    assert ramp.value(6.0) == pytest.approx(2.0)
    ramp.set_rate(6.0, 2.0)
    assert ramp.value(6.5) == pytest.approx(1.0)
    ramp.stop(6.5)
    assert ramp.value(100.0) == pytest.approx(1.0)


def test_thermal_approach_inside_the_band_is_a_pure_exponential() -> None:
    # 0.5 K away with rate * tau = 10 K: never rate-limited.
    bath = ThermalApproach(start=300.0, start_time=0.0, setpoint=300.5, rate=1.0,
                           time_constant=10.0)
    for t in (0.0, 5.0, 10.0, 40.0):
        assert bath.value(t) == pytest.approx(300.5 - 0.5 * math.exp(-t / 10.0), abs=1e-12)


def test_thermal_approach_far_away_ramps_then_relaxes_smoothly() -> None:
    # Cooling 300 K -> 100 K at 1 K/s, tau 20 s: linear until 20 K away, i.e. for 180 s.
    bath = ThermalApproach(start=300.0, start_time=0.0, setpoint=100.0, rate=1.0,
                           time_constant=20.0)
    assert bath.value(90.0) == pytest.approx(210.0)
    assert bath.value(180.0) == pytest.approx(120.0)
    assert bath.value(200.0) == pytest.approx(100.0 + 20.0 * math.exp(-1.0))
    # The slope is continuous at the switch: 1 K/s on both sides.
    h = 1e-4
    before = (bath.value(180.0) - bath.value(180.0 - h)) / h
    after = (bath.value(180.0 + h) - bath.value(180.0)) / h
    assert before == pytest.approx(-1.0, rel=1e-3)
    assert after == pytest.approx(-1.0, rel=1e-3)


def test_thermal_approach_new_setpoint_starts_from_the_present_temperature() -> None:
    bath = ThermalApproach(start=10.0, start_time=0.0, setpoint=10.0, rate=0.5,
                           time_constant=30.0)
    bath.retarget(100.0, 50.0)  # 40 K up at 0.5 K/s: linear while > 15 K away, 50 s
    assert bath.value(150.0) == pytest.approx(35.0)
