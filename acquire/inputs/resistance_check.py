"""The sample model against the device: the channel resistance the protocol's sample section
predicts (from `sheet_resistance`, else from the layers) against the first measured one.

The current densities, the density limit and the power limit all rest on that model, so a
unit slip (`sheet_resistance: 37.5 mohm` for 37.5 ohm) or a wrong resistivity silently moves
them. `check` compares a given sheet resistance with the layers; the run compares the model
with the first point's resistance (the runner calls `first_point_warning`).
"""

from __future__ import annotations

import math
from typing import Any

from acquire.inputs.stack import StackGeometry, channel_resistance

# The measured resistance may differ from the model by this much before a warning (thin-film
# resistivities are known to some 10-20 %; common practice).
FIRST_POINT_TOLERANCE = 0.30
# A given sheet resistance this far (as a factor) from what the layers give is likely a slip.
SHEET_RESISTANCE_FACTOR = 3.0


def is_longitudinal(channel: str, spec: Any) -> bool:
    # The rig's `probe`, else the channel's name: the rule of acquire.analysis.fit_context.
    probe = getattr(spec, "probe", None)
    if probe in ("longitudinal", "transverse"):
        return bool(probe == "longitudinal")
    return not any(mark in channel.lower() for mark in ("xy", "yx", "hall"))


def sheet_resistance_warning(protocol: Any) -> str | None:
    """At `check`: a given sheet resistance far from what the layers give (a unit slip?)."""
    sample = protocol.sample
    if sample.sheet_resistance is None:
        return None
    geometry = StackGeometry.from_sample(sample)
    from_layers = channel_resistance(geometry.length_m, geometry.width_m, geometry.layers)
    given = geometry.resistance_ohm
    ratio = given / from_layers
    if 1 / SHEET_RESISTANCE_FACTOR <= ratio <= SHEET_RESISTANCE_FACTOR:
        return None
    squares = geometry.length_m / geometry.width_m
    return (f"sample.sheet_resistance {sample.sheet_resistance:.4g} ohm gives {given:.4g} ohm "
            f"between the probes, {ratio:.3g} times the {from_layers:.4g} ohm the layers give "
            f"({from_layers / squares:.4g} ohm per square); current densities and limits use "
            "the sheet resistance: check its unit")


def first_point_warning(loaded: Any, rig: Any, point_number: int, result: Any) -> str | None:
    """After point 0: the warning to log when the first longitudinal channel's measured
    resistance is more than FIRST_POINT_TOLERANCE from the model's, else None. `result` is the
    mode's reduced point (its `resistance_ohm`, one per channel, in the channels' order)."""
    resistances = getattr(result, "resistance_ohm", None)
    if point_number != 0 or resistances is None:
        return None
    channels = list(loaded.mode.channels(loaded.protocol))
    instruments = rig.rig.instruments
    index = next((i for i, name in enumerate(channels)
                  if is_longitudinal(name, instruments.get(name))), None)
    if index is None:
        return None
    measured = float(resistances[index])
    geometry = StackGeometry.from_sample(loaded.protocol.sample)
    model = geometry.resistance_ohm
    if not math.isfinite(measured) or measured <= 0 or model <= 0:
        return None
    deviation = measured / model - 1
    if abs(deviation) <= FIRST_POINT_TOLERANCE:
        return None
    squares = geometry.length_m / geometry.width_m
    source = ("sample.sheet_resistance" if loaded.protocol.sample.sheet_resistance is not None
              else "the layers' thicknesses and resistivities")
    off = f"{deviation:+.0%} from" if abs(deviation) < 1 else f"{measured / model:.3g} times"
    return (f"first point: {channels[index]} measures {measured:.4g} ohm, {off} "
            f"the {model:.4g} ohm the sample model gives from {source}; the current "
            "densities and the density and power limits use that model -- check the sample "
            f"section (measured sheet resistance {measured / squares:.4g} ohm per square)")
