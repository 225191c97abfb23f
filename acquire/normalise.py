"""The merged, unit-normalised protocol: what `check --show` prints and run.json stores."""

from __future__ import annotations

from typing import Any

from acquire.load import LoadedProtocol, LoadedRig


def normalised_protocol(loaded: LoadedProtocol) -> dict[str, Any]:
    """SI values (angles in degrees) with the unit spelled in each key's suffix."""
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
            {
                "axis": loop.axis,
                "unit": {"temperature": "K", "field": "T", "angle": "deg", "current": "A"}[
                    loop.axis
                ],
                "snake": loop.snake,
                "values": list(values),
            }
            for loop, values in zip(protocol.loops, loaded.loop_values)
        ],
        "alternation": {
            "pattern": protocol.alternation.pattern,
            "cycles": protocol.alternation.cycles,
            "settle_s": protocol.alternation.settle,
        },
        "readings": protocol.readings.model_dump(),
        "waits": {
            "field": _suffixed(protocol.waits.field.model_dump(), {"tolerance": "T"}),
            "temperature": _suffixed(protocol.waits.temperature.model_dump(), {"tolerance": "K"}),
            "angle": _suffixed(protocol.waits.angle.model_dump(), {"tolerance": "deg"}),
        },
        "limits": {
            "current_A": protocol.limits.current,
            "current_density_A_m2": protocol.limits.current_density,
            "field_T": protocol.limits.field,
            "temperature_max_K": protocol.limits.temperature_max,
        },
        "finish": protocol.finish.model_dump(),
        "on_problem": protocol.on_problem.model_dump(),
        "notify": protocol.notify,
    }
    return data


def _suffixed(values: dict[str, Any], units: dict[str, str]) -> dict[str, Any]:
    result = {}
    for key, value in values.items():
        suffix = units.get(key, "s")
        result[f"{key}_{suffix}"] = value
    return result


def normalised_rig(loaded: LoadedRig) -> dict[str, Any]:
    rig = loaded.rig
    instruments = {}
    for name, spec in rig.instruments.items():
        entry = spec.model_dump(exclude_none=True, by_alias=True)
        entry["limits"] = spec.limits.model_dump(exclude_none=True)
        for key in ("min", "max"):
            if (name, key) in loaded.ranges:
                entry["limits"][key] = loaded.ranges[(name, key)]
        instruments[name] = entry
    return {
        "name": rig.name,
        "visa_library": rig.visa_library,
        "mains_frequency_Hz": rig.mains_frequency,
        "instruments": instruments,
        "simulation": dict(rig.simulation),
    }
