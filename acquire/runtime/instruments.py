"""The opened instruments of a run, looked up by role (typed by the role's interface) or name.

Every driver is wrapped in a guard that checks the values of its role's limited methods
against the run's bounds (the rig's, tightened by the protocol's) before the call: the same
table the transport checks on the command text, so a driver of the user's own that builds its
commands elsewhere is held to the limits too.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any, TypeVar

from drivers.command_limits import CommandLimits
from drivers.rig import Rig
from drivers.roles import role_named
from drivers.roles.base import Role

DriverT = TypeVar("DriverT")


class Guarded:
    """A driver whose limited methods refuse values past the run's bounds (LimitError)."""

    def __init__(self, driver: Any, limits: CommandLimits, methods: dict[str, str]) -> None:
        self._driver = driver
        self._limits = limits
        self._methods = methods  # method name -> template name
        self.name: str = driver.name

    @property
    def driver(self) -> Any:
        return self._driver

    def __getattr__(self, attribute: str) -> Any:
        found = getattr(self._driver, attribute)
        if not callable(found):
            return found
        template = self._methods.get(attribute)
        method = found if template is None else self._checked(found, template)
        setattr(self, attribute, method)  # looked up once: this runs for every reading
        return method

    def _checked(self, method: Callable[..., Any], template: str) -> Callable[..., Any]:
        def call(value: float, *rest: Any, **options: Any) -> Any:
            if isinstance(value, (int, float)):
                self._limits.refuse_past(self.name, template, float(value), float(value),
                                         f"{method.__name__}({value!r})")
            return method(value, *rest, **options)

        return call


class Instruments:
    def __init__(self, rig: Rig, opened: dict[str, Any],
                 limits: dict[str, CommandLimits] | None = None) -> None:
        """`limits`: each instrument's bounds for the run (acquire.plan.limits.command_limits);
        its role's rig limits when not given."""
        self.rig = rig
        self.by_name: dict[str, Any] = {}
        limits = dict(limits or {})
        for name, driver in opened.items():
            role = role_named(rig.instruments[name].role)
            limits.setdefault(name, CommandLimits(role.template_limits, rig.instruments[name]))
            # A built-in driver checks the command text against the same bounds.
            own = getattr(driver, "limits", None)
            if isinstance(own, CommandLimits):
                limits[name] = _merged(own, limits[name])
            methods = {limit.method: limit.template for limit in role.template_limits}
            self.by_name[name] = Guarded(driver, limits[name], methods)
        # What the run calls: the guarded drivers, or their retrying views once a fault
        # budget is attached. `by_name` stays the guarded drivers (the safe shutdown's).
        self.views: dict[str, Any] = dict(self.by_name)

    def attach(self, wrap: Callable[[Any], Any]) -> None:
        """Route the run's calls through `wrap(guarded driver)` (the fault budget's view)."""
        self.views = {name: wrap(guarded) for name, guarded in self.by_name.items()}

    def named(self, name: str) -> Any:
        return self.views[name]

    def one(self, role: Role[DriverT]) -> DriverT | None:
        entry = self.rig.one(role)
        return self.views.get(entry[0]) if entry else None

    def required(self, role: Role[DriverT]) -> DriverT:
        found = self.one(role)
        if found is None:
            raise LookupError(f"the rig has no {role.name}")
        return found

    def name_of(self, role: Role[Any]) -> str | None:
        entry = self.rig.one(role)
        return entry[0] if entry else None

    def spec(self, name: str) -> Any:
        return self.rig.instruments[name]

    def all(self) -> Iterator[Any]:
        yield from self.views.values()


def _merged(own: CommandLimits, run: CommandLimits) -> CommandLimits:
    """The driver's own table, tightened in place to the run's bounds (one table, two users)."""
    for template in run.templates():
        bound = run.get(template)
        if bound is not None and bound.high is not None:
            own.tighten(template, high=bound.high, source=bound.source)
        if bound is not None and bound.low is not None:
            own.tighten(template, low=bound.low, source=bound.source)
    return own
