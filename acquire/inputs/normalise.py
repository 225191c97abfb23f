"""The merged, unit-normalised protocol and rig: what `check --show` prints and run.json
stores. SI values (angles in degrees) with the unit spelled in each key's suffix."""

from __future__ import annotations

from typing import Any

from acquire.inputs.load import LoadedProtocol, LoadedRig
from acquire.inputs.protocol import CURRENT_AXIS
from drivers.roles import movable_axes
from drivers.roles.current_source import CURRENT


def _axis_unit(axis: str) -> str:
    if axis == CURRENT_AXIS:
        return CURRENT.si_unit
    return next(a.quantity.si_unit for a in movable_axes() if a.name == axis)


def normalised_protocol(loaded: LoadedProtocol) -> dict[str, Any]:
    protocol = loaded.protocol
    sample = protocol.sample
    data: dict[str, Any] = {
        "name": protocol.name,
        "mode": protocol.mode,
        "sample": {
            "id": sample.id,
            "stack": sample.stack,
            "channel_length_m": sample.channel.length,
            "channel_width_m": sample.channel.width,
            "layers": [
                {
                    "name": layer.name,
                    "thickness_m": layer.thickness,
                    "resistivity_ohm_m": layer.resistivity,
                    "carrier": layer is sample.carrier,
                }
                for layer in sample.layers
            ],
            "sheet_resistance_ohm": sample.sheet_resistance,
        },
        "rotation_plane": protocol.rotation_plane,
        "loops": [
            {"axis": loop.axis, "unit": _axis_unit(loop.axis),
             "alternate_direction": loop.alternate_direction, "values": list(values)}
            for loop, values in zip(protocol.loops, loaded.loop_values)
        ],
        **loaded.mode.normalised_sections(protocol),
        "waits": {
            axis.name: _suffixed(getattr(protocol.waits, axis.name).model_dump(),
                                 {"tolerance": axis.quantity.si_unit})
            for axis in movable_axes()
        },
        "limits": {
            "current_A": protocol.limits.current,
            "current_density_A_m2": protocol.limits.current_density,  # or per layer
            "power_W": protocol.limits.power,
            "field_T": protocol.limits.field,
            "temperature_max_K": protocol.limits.temperature_max,
        },
        "max_points": protocol.max_points,
        "finish": protocol.finish.model_dump(),
        "on_problem": protocol.on_problem.model_dump(),
        "notify": protocol.notify,
    }
    return data


def _suffixed(values: dict[str, Any], units: dict[str, str]) -> dict[str, Any]:
    return {f"{key}_{units.get(key, 's')}": value for key, value in values.items()}


def normalised_rig(loaded: LoadedRig) -> dict[str, Any]:
    rig = loaded.rig
    instruments = {}
    for name, spec in rig.instruments.items():
        entry = spec.model_dump(exclude_none=True, by_alias=True)
        entry["limits"] = spec.limits.model_dump(exclude_none=True)
        instruments[name] = entry
    return {
        "name": rig.name,
        "visa_library": rig.visa_library,
        "mains_frequency_Hz": rig.mains_frequency,
        "instruments": instruments,
        "simulation": dict(rig.simulation),
    }
