"""The rotator: absolute moves in degrees, position, whether it is still moving, speed."""

from __future__ import annotations

from drivers.base import DialectDriver


class DialectRotator(DialectDriver):
    role = "rotator"

    def configure(self, speed_deg_per_s: float) -> None:
        # Without a speed command the rotator moves at the speed set on the instrument itself.
        if self._supports("speed"):
            self.transport.send("speed", speed_deg_per_s)
        self.transport.check_errors()

    def move_to(self, degrees: float) -> None:
        self.transport.send("move", degrees)

    def position(self) -> float:
        return self.transport.ask_number("position")

    def moving(self) -> bool:
        return self.transport.ask_flag("moving")

    def home(self) -> None:
        self.transport.send("home")
