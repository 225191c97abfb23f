"""Simulated behaviour by role: every module here defines `build(world, name, spec)`, named
after the role it simulates (drivers/roles/<role>.py), returning a SimulatedInstrument."""

from __future__ import annotations

import importlib
from collections.abc import Callable
from functools import cache
from typing import Any

from sim_instruments.world import Clock, Sample, SimulatedWorld


def build_world(clock: Clock, sample: Sample, rig: Any) -> SimulatedWorld:
    """A world with one simulated instrument per rig entry, built by its role's module."""
    world = SimulatedWorld(clock, sample, rig)
    for name, spec in rig.instruments.items():
        world.instruments[name] = simulated_role(spec.role)(world, name, spec)
    return world


@cache
def simulated_role(role: str) -> Callable[[Any, str, Any], Any]:
    try:
        module = importlib.import_module(f"{__name__}.{role}")
    except ModuleNotFoundError:
        raise ValueError(f"no simulated behaviour for the role {role!r} "
                         f"(sim_instruments/roles/{role}.py)") from None
    build: Callable[[Any, str, Any], Any] = module.build
    return build


@cache
def static_replies(role: str) -> dict[str, object]:
    """What a role's static pyvisa-sim definitions answer before anything is set (SI)."""
    module = importlib.import_module(f"{__name__}.{role}")
    return dict(getattr(module, "STATIC_REPLIES", {}))
