"""`driver: package.module:Class` in a rig loads the user's class (the classes live here)."""

from __future__ import annotations

from typing import Any

import pytest

from acquire.errors import InputError
from drivers.factory import open_instruments
from drivers.roles.voltmeter import DialectVoltmeter
from tests.test_drivers_support import OhmicSample, make_rig, simulated, standard_instruments


class AveragingVoltmeter(DialectVoltmeter):
    """A user's voltmeter: every reading is the mean of three, in the role's dialect."""

    def read(self) -> float:
        self.readings_taken = getattr(self, "readings_taken", 0) + 3
        single = super().read
        return sum(single() for _ in range(3)) / 3


class HalfAVoltmeter:
    """Has a constructor but not the role's methods."""

    def __init__(self, name: str, spec: Any, resource_manager: Any) -> None:
        self.name = name

    def read(self) -> float:
        return 0.0


def _rig_with_driver(driver: str) -> Any:
    instruments = standard_instruments()
    instruments["vxx"]["driver"] = driver
    return make_rig(instruments)


def test_the_rigs_driver_class_is_used() -> None:
    rig = _rig_with_driver("tests.test_drivers_user:AveragingVoltmeter")
    sample = OhmicSample(resistance_ohm=100.0)
    with simulated(rig, sample) as (_, drivers):
        meter = drivers["vxx"]
        assert type(meter) is AveragingVoltmeter
        drivers["source"].set_current(1e-3)
        drivers["source"].set_output(True)
        assert meter.read() == pytest.approx(0.1, rel=1e-8)
        assert meter.readings_taken == 3
        assert len(sample.readings) == 3
        assert type(drivers["vxy"]) is DialectVoltmeter


class NeverOpens:
    """A resource manager that fails the test if anything is opened."""

    def open_resource(self, *args: Any, **kwargs: Any) -> Any:
        raise AssertionError("an instrument was opened before the rig was checked")


def test_a_class_lacking_the_roles_methods_is_named_before_anything_opens() -> None:
    rig = _rig_with_driver("tests.test_drivers_user:HalfAVoltmeter")
    with pytest.raises(InputError) as raised:
        open_instruments(rig, NeverOpens())  # type: ignore[arg-type]
    assert raised.value.key == ("instruments", "vxx", "driver")
    for method in ("configure", "identify", "errors", "reconnect", "close"):
        assert method in raised.value.problem


@pytest.mark.parametrize("path, problem", [
    ("tests.no_such_module:Meter", "cannot import"),
    ("tests.test_drivers_user:NoSuchClass", "no class 'NoSuchClass'"),
])
def test_a_driver_that_cannot_be_found(path: str, problem: str) -> None:
    with pytest.raises(InputError, match=problem):
        open_instruments(_rig_with_driver(path), NeverOpens())  # type: ignore[arg-type]
