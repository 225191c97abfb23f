"""Every role's limits, from its one table (drivers/roles/<role>.py), refuse a value past them
at the driver, before anything is written: for the built-in drivers on the rendered command
text (the transport), and for any driver through the run's guard (acquire.runtime.instruments)."""

from __future__ import annotations

from typing import Any

import pytest

from acquire.runtime.instruments import Instruments
from drivers.errors import LimitError
from drivers.rig import Rig
from drivers.roles import all_roles

# A rig whose every role has every limit set (SI values after parsing).
RIG = Rig.model_validate({"name": "limits", "instruments": {
    "source": {"role": "current_source", "resource": "GPIB0::1::INSTR",
               "limits": {"current": "10 mA"}},
    "vxx": {"role": "voltmeter", "resource": "GPIB0::2::INSTR"},
    "magnet": {"role": "field", "resource": "GPIB0::3::INSTR",
               "limits": {"field": "1 T", "ramp_rate": "0.5 T/min"}},
    "stage": {"role": "rotator", "resource": "GPIB0::4::INSTR",
              "limits": {"min": "-10 deg", "max": "370 deg"}},
    "cryo": {"role": "temperature", "resource": "GPIB0::5::INSTR",
             "limits": {"min": "2 K", "max": "350 K"}},
}})

CASES = [
    (role, limit) for role in all_roles() for limit in role.template_limits
]


class RecordingSession:
    """A VISA session that records every message; it answers queries with nothing useful."""

    def __init__(self, sent: list[str]) -> None:
        self.sent = sent

    def write(self, message: str) -> None:
        self.sent.append(message)

    def query(self, message: str) -> str:
        self.sent.append(message)
        return '0,"No error"'

    def close(self) -> None:
        pass

    def set_visa_attribute(self, *args: Any) -> None:
        pass


class RecordingManager:
    def __init__(self) -> None:
        self.sent: list[str] = []

    def open_resource(self, resource: str, **options: Any) -> RecordingSession:
        return RecordingSession(self.sent)


def beyond(low: float | None, high: float | None, symmetric: bool) -> list[float]:
    """Values just past each bound (and past -high for a bound on the magnitude)."""
    values = []
    if high is not None:
        values.append(high * 1.01 + 1e-12)
        if symmetric:
            values.append(-high * 1.01 - 1e-12)
    if low is not None:
        values.append(low - abs(low) * 0.01 - 1e-3)
    return values


def call(driver: Any, method: str, value: float) -> None:
    getattr(driver, method)(value)


@pytest.mark.parametrize(("role", "limit"), CASES,
                         ids=[f"{role.name}.{limit.template}" for role, limit in CASES])
def test_a_value_past_the_limit_is_refused_by_the_built_in_driver_with_no_io(
    role: Any, limit: Any
) -> None:
    name, spec = RIG.one(role)  # type: ignore[misc]
    low, high = limit.bounds(spec)
    assert low is not None or high is not None, "the test rig sets every limit"
    manager = RecordingManager()
    driver = role.driver(name, spec, manager)
    for value in beyond(low, high, limit.symmetric):
        with pytest.raises(LimitError, match="refused"):
            call(driver, limit.method, value)
        assert manager.sent == [], f"{value!r} reached the instrument as {manager.sent}"


@pytest.mark.parametrize(("role", "limit"), CASES,
                         ids=[f"{role.name}.{limit.template}" for role, limit in CASES])
def test_the_run_guard_refuses_it_for_a_driver_of_the_users_own(role: Any, limit: Any) -> None:
    name, spec = RIG.one(role)  # type: ignore[misc]
    calls: list[tuple[str, float]] = []

    class OwnDriver:  # builds its commands elsewhere: no transport to check them
        def __init__(self) -> None:
            self.name = name

        def __getattr__(self, method: str) -> Any:
            return lambda *args: calls.append((method, *args))

    guarded = Instruments(RIG, {name: OwnDriver()}).named(name)
    low, high = limit.bounds(spec)
    for value in beyond(low, high, limit.symmetric):
        with pytest.raises(LimitError):
            call(guarded, limit.method, value)
    assert calls == []
    inside = high if high is not None else low
    call(guarded, limit.method, inside)  # a value at the bound goes through
    assert calls == [(limit.method, inside)]


def test_every_role_that_sends_a_setpoint_or_a_level_has_a_limit() -> None:
    # The roles whose commands can harm the device or the magnet: every one is bounded.
    bounded = {role.name for role in all_roles() if role.template_limits}
    assert bounded == {"current_source", "field", "rotator", "temperature"}


def test_the_protocols_own_limits_tighten_the_rigs_for_the_run(
    make_protocol: Any, tmp_path: Any
) -> None:
    from acquire.inputs.load import load_protocol, load_rig
    from acquire.plan.limits import command_limits
    from tests.conftest import SIMULATED_RIG

    # The simulated rig allows 20 mA and 2 T; the sample 5 mA and 0.5 T.
    loaded = load_protocol(make_protocol(
        "{axis: field, values: [0.1 T]}", "{axis: current, values: [1 mA]}",
        limits="{current: 5 mA, field: 0.5 T}"))
    rig = load_rig(SIMULATED_RIG)
    manager = RecordingManager()
    opened = {name: role.driver(name, rig.rig.instruments[name], manager)
              for role in all_roles() for name in rig.rig.of_role(role)}
    instruments = Instruments(rig.rig, opened, command_limits(loaded, rig))
    with pytest.raises(LimitError, match="sample limit"):
        instruments.named("source").set_current(6e-3)
    with pytest.raises(LimitError, match="sample limit"):
        instruments.named("magnet").set_target(-0.6)
    # The built-in driver's own table was tightened too: the transport refuses the text.
    with pytest.raises(LimitError, match="sample limit"):
        opened["source"].set_current(6e-3)
    assert manager.sent == []
    instruments.named("source").set_current(5e-3)
    assert manager.sent == ["SOUR:CURR 0.005"]
