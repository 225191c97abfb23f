"""The current source: level, output, compliance. The one role every rig needs."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Literal, Protocol

from pydantic import Field

from drivers.command_limits import past
from drivers.driver_base import DialectDriver
from drivers.interface import Instrument
from drivers.quantities import Current, Voltage
from drivers.roles.base import (
    LoadCheck,
    Quantity,
    Role,
    SafeAction,
    SafeCheck,
    SafeReading,
    TemplateLimit,
    entry_error,
)
from drivers.spec import InstrumentSpec, Strict

CURRENT = Quantity("current", "A", "mA", 1e3)


class CurrentSource(Instrument, Protocol):
    def configure(self, compliance_V: float | None) -> None: ...
    def set_current(self, amperes: float) -> None: ...
    def set_output(self, on: bool) -> None: ...
    def compliance_tripped(self) -> bool: ...
    def read_current(self) -> float: ...


class CurrentSourceLimits(Strict):
    current: Current | None = Field(
        default=None, gt=0, description="the most this rig may ever source, either polarity"
    )


class CurrentSourceSpec(InstrumentSpec):
    role: Literal["current_source"]
    limits: CurrentSourceLimits = CurrentSourceLimits()
    compliance: Voltage | None = Field(
        default=None, gt=0, description="compliance voltage set on the source"
    )


TEMPLATE_LIMITS = (
    # The last guard between a typo in a protocol and a burnt device.
    TemplateLimit("set_current", "set_current", CURRENT, "the rig's limit", high="current",
                  symmetric=True),
)
COMPLIANCE_WARNING_FRACTION = 0.8  # common practice: keep headroom below the compliance voltage
# A level read back within this of zero is zero: a source programmed to 0 reads back 0, and a
# current left on by a failed shutdown is the run's mA-scale setting (common practice).
ZERO_CURRENT_A = 1e-9


class DialectCurrentSource(DialectDriver):
    template_limits = TEMPLATE_LIMITS

    def configure(self, compliance_V: float | None) -> None:
        if self._supports("source_current_mode"):
            self.transport.send("source_current_mode")
        if compliance_V is not None:
            self.transport.send("compliance", compliance_V)
        self.transport.check_errors()

    def set_current(self, amperes: float) -> None:
        self.transport.send("set_current", amperes)

    def set_output(self, on: bool) -> None:
        self.transport.send("output_on" if on else "output_off")

    def compliance_tripped(self) -> bool:
        # Without a trip query the source cannot tell; the readings will show it.
        return self.transport.ask_flag("tripped") if self._supports("tripped") else False

    def read_current(self) -> float:
        return self.transport.ask_number("read_current")

    def reads_current(self) -> bool:
        return self._supports("read_current")

    def output_is_on(self) -> bool | None:
        """The output relay's state; None when the dialect has no query for it."""
        return self.transport.ask_flag("output_state") if self._supports("output_state") else None


def _check(spec: CurrentSourceSpec) -> None:
    if spec.limits.current is None:
        raise entry_error(
            "the current source has no current limit", ("limits",),
            "add 'limits: {current: 20 mA}' (the most this rig may ever source)",
        )


def _check_load(spec: CurrentSourceSpec, peak_A: float, expected_V: float) -> LoadCheck:
    compliance = spec.compliance
    if compliance is None:
        return LoadCheck()
    if past(expected_V, None, compliance, False):
        return LoadCheck((
            f"current {CURRENT.shown(peak_A)} needs about {expected_V:.3g} V across the sample, "
            f"above the compliance {compliance:g} V",
            "lower the current or raise the compliance (within the device's tolerance)",
        ), compliance_V=compliance)
    warnings: tuple[str, ...] = ()
    if expected_V > COMPLIANCE_WARNING_FRACTION * compliance:
        warnings = (
            f"expected peak voltage {expected_V:.3g} V is above "
            f"{COMPLIANCE_WARNING_FRACTION:.0%} of the compliance {compliance:g} V; "
            "contacts and leads add to it",
        )
    return LoadCheck(None, warnings, compliance)


def _configure(driver: CurrentSource, spec: CurrentSourceSpec) -> None:
    driver.configure(spec.compliance)
    driver.set_current(0.0)


def _safe_state(driver: CurrentSource, finish: Mapping[str, object]) -> list[SafeAction]:
    # Always, whatever `finish` says: the current to zero first, then the output off.
    return [("current to zero", lambda: driver.set_current(0.0)),
            ("output off", lambda: driver.set_output(False))]


def _current_reading(driver: CurrentSource) -> SafeReading:
    reads = getattr(driver, "reads_current", None)
    if reads is not None and not reads():
        return SafeReading(None, "its dialect has no read_current query")
    level = driver.read_current()
    return SafeReading(abs(level) <= ZERO_CURRENT_A, f"current {CURRENT.shown(level)}")


def _output_reading(driver: CurrentSource) -> SafeReading:
    # A driver of the user's own may have no output query at all.
    query = getattr(driver, "output_is_on", None)
    on = query() if query is not None else None
    if on is None:
        return SafeReading(None, "its dialect has no output_state query")
    return SafeReading(not on, "output on" if on else "output off")


def _verify_safe(driver: CurrentSource, finish: Mapping[str, object]) -> list[SafeCheck]:
    return [("current at zero", lambda: _current_reading(driver)),
            ("output off", lambda: _output_reading(driver))]


ROLE: Role[CurrentSource] = Role(
    name="current_source",
    interface=CurrentSource,
    driver=DialectCurrentSource,
    spec=CurrentSourceSpec,
    summary="a DC current source (level, output, compliance)",
    template_limits=TEMPLATE_LIMITS,
    required=True,
    check=_check,
    check_load=_check_load,
    configure=_configure,
    safe_state=_safe_state,
    verify_safe=_verify_safe,
    shutdown_rank=0,
    order=0,
)
