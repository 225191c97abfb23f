"""Property-based safety tests: whatever protocol and rig `check` accepts, a dry run never asks
the simulated instruments for more than the limits allow; whatever it refuses, it refuses with
exit 2 and one line, before any VISA session exists.

Protocols and rigs are drawn at random (axes, order, values partly inside and partly outside
the limits, ranges, `return`, `alternate_direction`, patterns, units) and written as YAML; the
limits the assertions use are computed here, from the text written, with this file's own unit
table and the parallel-resistor formula -- never by the code under test.
"""

from __future__ import annotations

import contextlib
import copy
import dataclasses
import io
import math
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

# -- units, written out here (not read from acquire.units) -----------------------------------
# SI factors: exact by the definitions of the prefixes; 1 Oe and 1 G both correspond to
# mu0*H = 1e-4 T (CGS: B = 1 G = 1e-4 T; H = 1 Oe = 1000/(4*pi) A/m, mu0 * H = 1e-4 T).
CURRENT_UNITS = {"A": 1.0, "mA": 1e-3, "uA": 1e-6}
FIELD_UNITS = {"T": 1.0, "mT": 1e-3, "Oe": 1e-4, "G": 1e-4}
ANGLE_UNITS = {"deg": 1.0, "rad": 180.0 / math.pi}  # degrees inside (DEVELOPERS.md)
TEMPERATURE_UNITS = {"K": 1.0}
LENGTH_UNITS = {"um": 1e-6, "nm": 1e-9}
RESISTIVITY_UNITS = {"uohm*cm": 1e-8}  # 1 uohm*cm = 1e-6 ohm * 1e-2 m
FIELD_RATE_UNITS = {"T/min": 1.0 / 60.0}
ALL_UNITS = {**CURRENT_UNITS, **FIELD_UNITS, **ANGLE_UNITS, **TEMPERATURE_UNITS,
             **LENGTH_UNITS, **RESISTIVITY_UNITS, **FIELD_RATE_UNITS, "ohm": 1.0,
             "A/m^2": 1.0}

# Allowed excess over a limit, relative. The limits below are parsed from the same text as
# the code parses, but by a different route (float(x) * factor here, pint there), so the two
# may differ by a few ulp (~1e-16); the check itself lets a derived current density pass up
# to 1e-9 above its limit (acquire/limits.py ROUND_OFF), and the source's command carries
# 9 significant digits (drivers/dialects/current_source.yaml: up to 5e-9 rounding). Anything
# beyond 1e-8 is a value the protocol did not ask for, not round-off: that is what must fail.
REL = 1e-8
# Temperatures go out with 4 decimals (drivers/dialects/temperature.yaml) and the rig's
# temperature limits here have at most 3, so a setpoint on its limit is sent exactly:
# 1e-9 K covers only float noise.
ABS_K = 1e-9
# Limits hold for the numbers as the instruments read them from the command text: check
# compares the rendered text (acquire/command_text.py), the drivers refuse a rendered value past
# a limit and round ramp rates toward zero. So only float noise is allowed past a limit.
FIELD_TEXT_REL = REL
ANGLE_TEXT_DEG = 1e-9


def si(text: str) -> float:
    """'2.5 mA' -> 0.0025, by this file's table."""
    number, unit = text.split(" ", 1)
    return float(number) * ALL_UNITS[unit]


def text(number: float, unit: str, digits: int = 6) -> str:
    return f"{number:.{digits}g} {unit}"


# -- what a drawn case is -----------------------------------------------------------------------
@dataclass
class Case:
    protocol: dict[str, Any]
    rig: dict[str, Any]
    # the bounds the instruments must stay within, in SI (inf: no bound of that kind)
    current_max_A: float = math.inf
    field_max_T: float = math.inf
    ramp_max_T_per_s: float = math.inf
    angle_range_deg: tuple[float, float] = (-math.inf, math.inf)
    temperature_range_K: tuple[float, float] = (-math.inf, math.inf)


def _sig(draw: st.DrawFn, low: float, high: float, digits: int = 3) -> float:
    """A number in [low, high] rounded to `digits` significant digits (kept in range)."""
    value = draw(st.floats(low, high, allow_nan=False, allow_infinity=False))
    rounded = float(f"{value:.{digits}g}")
    return min(max(rounded, low), high)


def _now_and_then(draw: st.DrawFn, one_in: int) -> bool:
    """True about once in `one_in` draws. (Hypothesis favours the ends of an integer range, so
    `integers(0, n) == 0` would come up far more often than 1/n; this shrinks to False.)"""
    return draw(st.sampled_from([False] * (one_in // 2) + [True] + [False] * (one_in // 2)))


def _fixed(draw: st.DrawFn, low: float, high: float, decimals: int) -> float:
    """A number in [low, high] with at most `decimals` decimals (limits of angle and K)."""
    scale = 10**decimals
    return draw(st.integers(math.ceil(low * scale), math.floor(high * scale))) / scale


# -- rigs ---------------------------------------------------------------------------------------
@st.composite
def rigs(draw: st.DrawFn) -> tuple[dict[str, Any], dict[str, Any]]:
    """A simulated rig with random hardware limits; also its limits in SI, parsed here."""
    source_limit = text(_sig(draw, 0.5, 20.0), "mA")
    # Now and then a limit with more digits than the dialect's command text carries.
    field_limit = text(_sig(draw, 0.2, 2.0, draw(st.sampled_from([3, 3, 8]))), "T", 8)
    ramp_limit = text(_sig(draw, 0.5, 2.0), "T/min")
    # The simulated stage starts at 0 deg (its home), which a real stage's range includes.
    angle_min = _fixed(draw, -20.0, 0.0, draw(st.integers(0, 3)))
    angle_max = _fixed(draw, 90.0, 370.0, draw(st.integers(0, 3)))
    angle_limits = {"min": f"{angle_min:g} deg", "max": f"{angle_max:g} deg"}
    if _now_and_then(draw, 4):  # in radians, as a stage's manual may give them
        angle_limits = {key: f"{value / ANGLE_UNITS['rad']:.5g} rad"
                        for key, value in (("min", angle_min), ("max", angle_max))}
        angle_min, angle_max = si(angle_limits["min"]), si(angle_limits["max"])
    # The simulated bath starts at 300 K (the rig's start_temperature_K): keep that in range.
    temperature_min = _fixed(draw, 250.0, 299.0, draw(st.integers(0, 3)))
    temperature_max = _fixed(draw, 301.0, 350.0, draw(st.integers(0, 3)))
    magnet: dict[str, Any] = {"role": "field", "resource": "GPIB0::14::INSTR",
                              "limits": {"field": field_limit, "ramp_rate": ramp_limit}}
    if draw(st.booleans()):  # a ramp rate setting, now and then above the limit (refused)
        fraction = 1.2 if _now_and_then(draw, 8) else draw(st.floats(0.3, 1.0))
        magnet["ramp_rate"] = text(si(ramp_limit) * 60.0 * fraction, "T/min", 3)
    stage: dict[str, Any] = {"role": "rotator", "resource": "ASRL3::INSTR",
                             "speed": text(_sig(draw, 10.0, 60.0, 2), "deg/s"),
                             "limits": angle_limits}
    backlash = draw(st.sampled_from([None, None, 0.0, 1.0, 2.0, 5.0]))  # None: the default
    if backlash is not None:
        stage["backlash"] = f"{backlash:g} deg"
    approach = draw(st.sampled_from([None, "positive", "negative"]))
    if approach is not None:
        stage["approach"] = approach
    rig = {
        "name": "property rig",
        "visa_library": "@sim",
        "instruments": {
            "source": {"role": "current_source", "resource": "GPIB0::5::INSTR",
                       "compliance": text(_sig(draw, 5.0, 20.0, 2), "V"),
                       "limits": {"current": source_limit}},
            "vxx": {"role": "voltmeter", "resource": "GPIB0::21::INSTR", "nplc": 0.1,
                    "probe": "longitudinal"},
            "vxy": {"role": "voltmeter", "resource": "GPIB0::22::INSTR", "nplc": 0.1,
                    "probe": "transverse"},
            "magnet": magnet,
            "stage": stage,
            "cryo": {"role": "temperature", "resource": "GPIB0::17::INSTR",
                     "rate": text(_sig(draw, 10.0, 60.0, 2), "K/min"),
                     "limits": {"min": f"{temperature_min:g} K",
                                "max": f"{temperature_max:g} K"}},
        },
        # A short thermal lag keeps temperature waits to a few virtual minutes.
        "simulation": {"start_temperature_K": 300, "temperature_time_constant_s": 5},
    }
    limits = {
        "current": si(source_limit),
        "field": si(field_limit),
        "ramp_rate": si(ramp_limit),
        "angle_min": angle_min,
        "angle_max": angle_max,
        "backlash": 2.0 if backlash is None else backlash,  # acquire.rig.DEFAULT_BACKLASH
        "positive": approach != "negative",
        "temperature_min": temperature_min,
        "temperature_max": temperature_max,
    }
    return rig, limits


# -- protocols ----------------------------------------------------------------------------------
@st.composite
def samples(draw: st.DrawFn) -> tuple[dict[str, Any], float]:
    """A sample section and the carrier-layer current density per ampere, computed here.

    Parallel-resistor model (Ohm's law for conductors in parallel, sharing one voltage): a layer
    of thickness t and resistivity rho carries the fraction (t/rho) / S of the current, S the
    stack's sheet conductance (sum of t/rho, or 1/R_sheet when the sheet resistance is given),
    so its density is I / (w * rho * S).
    """
    width = text(_sig(draw, 2.0, 10.0, 2), "um")
    length = text(_sig(draw, 20.0, 100.0, 2), "um")
    layers = [{"name": "Pt", "thickness": text(_sig(draw, 2.0, 10.0, 2), "nm"),
               "resistivity": text(_sig(draw, 10.0, 100.0, 2), "uohm*cm")}]
    if draw(st.booleans()):
        layers[0]["carrier"] = True
        layers.insert(0, {"name": "NiFe", "thickness": text(_sig(draw, 1.0, 10.0, 2), "nm"),
                          "resistivity": text(_sig(draw, 20.0, 100.0, 2), "uohm*cm")})
    sample: dict[str, Any] = {"id": "prop-1", "stack": "drawn",
                              "channel": {"length": length, "width": width}, "layers": layers}
    conductance = sum(si(layer["thickness"]) / si(layer["resistivity"]) for layer in layers)
    if draw(st.booleans()):
        # A measured sheet resistance near the computed one (interfaces add or remove a bit).
        sheet = _sig(draw, 0.8, 1.25, 3) / conductance
        sample["sheet_resistance"] = f"{sheet:.4g} ohm"
        conductance = 1.0 / si(sample["sheet_resistance"])
    carrier = layers[-1]
    per_ampere = 1.0 / (si(width) * si(carrier["resistivity"]) * conductance)
    return sample, per_ampere


@st.composite
def loop_values(
    draw: st.DrawFn, low: float, high: float, units: dict[str, float], beyond: bool,
    below_too: bool = True, positive: bool = False, margin: tuple[float, float] | None = None,
) -> dict[str, Any]:
    """A loop body (values or a range) in [low, high]; with `beyond`, one value lies past a
    limit (0.1-20 % of the span above `high`, or below `low` if `below_too`; log-uniform, so
    a value just past, inside a backlash margin, is as likely as one far past), so check must
    refuse it. `margin`: the range a naive check would allow (an angle's range without the
    backlash overshoot); values between it and [low, high] count as past, and are drawn often.
    """
    span = high - low
    unit = draw(st.sampled_from(sorted(units)))
    factor = units[unit]

    def written(value: float) -> str:
        return text(value / factor, unit)

    # Hypothesis favours the ends of a float range, so values on a limit come up often.
    inside = st.floats(low, high, allow_nan=False, allow_infinity=False)
    distance = st.floats(-3.0, -0.7).map(lambda exponent: span * 10**exponent)
    past = distance.map(lambda d: high + d)
    if below_too:
        past = past | distance.map(lambda d: low - d)
    # The margin is where a forgotten overshoot hides: give it as many draws as the rest.
    if margin is not None and margin[0] < low:
        past = past | st.floats(margin[0], low, exclude_max=True)
        past = past | st.floats(margin[0], low, exclude_max=True)
    if margin is not None and margin[1] > high:
        past = past | st.floats(high, margin[1], exclude_min=True)
        past = past | st.floats(high, margin[1], exclude_min=True)
    form = draw(st.sampled_from(["values", "step", "num"]))
    body: dict[str, Any]
    if form == "values":
        numbers = draw(st.lists(inside, min_size=0 if beyond else 1, max_size=3))
        if beyond:
            numbers.insert(draw(st.integers(0, len(numbers))), draw(past))
        body = {"values": [written(value) for value in numbers]}
    else:
        start, stop = draw(inside), draw(past if beyond else inside)
        if draw(st.booleans()):
            start, stop = stop, start
        if math.isclose(start, stop, rel_tol=1e-3, abs_tol=1e-12):
            body = {"values": [written(start)]}
        elif form == "step":
            count = draw(st.integers(2, 3))
            body = {"start": written(start), "stop": written(stop),
                    "step": text(abs(stop - start) / (count - 1) / factor, unit)}
        else:
            body = {"start": written(start), "stop": written(stop), "num": draw(st.integers(2, 3))}
            if positive and draw(st.booleans()):
                body["spacing"] = "log"
    multi = "values" not in body or len(body["values"]) > 1
    if multi and draw(st.booleans()):
        body["return"] = True
    return body


PATTERNS = ["+-", "-+", "+0-", "+0-0", "+--+"]


@st.composite
def cases(draw: st.DrawFn) -> Case:
    rig, hardware = draw(rigs())
    sample, per_ampere = draw(samples())
    limits: dict[str, str] = {}
    if not _now_and_then(draw, 12):  # now and then no current limit at all: refused
        if draw(st.booleans()):
            limits["current"] = text(_sig(draw, 0.5, 10.0), "mA")
        if "current" not in limits or draw(st.booleans()):
            limits["current_density"] = f"{_sig(draw, 3e10, 1e12):.3g} A/m^2"
    if draw(st.booleans()):
        limits["field"] = text(_sig(draw, 0.1, 2.0), "T")
    if draw(st.booleans()):
        limits["temperature_max"] = f"{_fixed(draw, 280.0, 360.0, 1):g} K"

    current_max = hardware["current"]
    if "current" in limits:
        current_max = min(current_max, si(limits["current"]))
    if "current_density" in limits:
        current_max = min(current_max, si(limits["current_density"]) / per_ampere)
    field_max = hardware["field"]
    if "field" in limits:
        field_max = min(field_max, si(limits["field"]))
    temperature_high = hardware["temperature_max"]
    if "temperature_max" in limits:
        temperature_high = min(temperature_high, si(limits["temperature_max"]))
    temperature_low = hardware["temperature_min"]
    backlash = hardware["backlash"]
    angle_low = hardware["angle_min"] + (backlash if hardware["positive"] else 0.0)
    angle_high = hardware["angle_max"] - (0.0 if hardware["positive"] else backlash)

    def beyond() -> bool:
        # About one loop in four reaches past its limits, so both outcomes of `check` occur.
        return _now_and_then(draw, 4)

    axes = draw(st.permutations(["temperature", "field", "angle", "current"]))
    used = [axis for axis in axes if axis == "current" or draw(st.booleans())]
    loops = []
    for index, axis in enumerate(used):
        if axis == "current":
            # Currents are amplitudes > 0: the only limit is above.
            body = draw(loop_values(current_max * 0.05, current_max, CURRENT_UNITS, beyond(),
                                    below_too=False, positive=True))
        elif axis == "field":
            body = draw(loop_values(-field_max, field_max, FIELD_UNITS, beyond()))
        elif axis == "angle":
            body = draw(loop_values(
                angle_low, max(angle_high, angle_low + 1.0), ANGLE_UNITS, beyond(),
                margin=(hardware["angle_min"], hardware["angle_max"])))
        else:
            # (A sample's temperature_max may lie below the rig's minimum: nothing validates.)
            body = draw(loop_values(temperature_low, max(temperature_high, temperature_low + 1),
                                    TEMPERATURE_UNITS, beyond(), positive=True))
        loop = {"axis": axis, **body}
        if index > 0 and draw(st.booleans()):
            loop["alternate_direction"] = True
        elif index == 0 and _now_and_then(draw, 16):
            loop["alternate_direction"] = True  # not allowed on the outermost loop: check refuses
        loops.append(loop)

    finish: dict[str, Any] = {"current": "off", "field": draw(st.sampled_from(["zero", "hold"]))}
    if draw(st.booleans()):  # a finish temperature, now and then outside the range
        low, high = (240.0, 360.0) if _now_and_then(draw, 6) else (
            temperature_low, max(temperature_high, temperature_low + 1))
        finish["temperature"] = f"{_fixed(draw, low, high, 1):g} K"
    protocol = {
        "name": "drawn protocol",
        "sample": sample,
        "rotation_plane": draw(st.sampled_from(["xy", "zx", "zy"])),
        "loops": loops,
        "alternation": {"pattern": draw(st.sampled_from(PATTERNS)),
                        "cycles": draw(st.integers(1, 2)), "settle": "1 ms"},
        "readings": {"per_step": 1, "channels": draw(st.sampled_from([["vxx"], ["vxx", "vxy"]]))},
        # Short holds and timeouts keep each dry run to a fraction of a second of wall time.
        "waits": {"field": {"tolerance": "1 mT", "hold": "0.5 s", "timeout": "10 min"},
                  "temperature": {"tolerance": "0.1 K", "hold": "1 s", "timeout": "5 min"},
                  "angle": {"tolerance": "0.05 deg", "settle": "0.1 s", "timeout": "2 min"}},
        "limits": limits,
        "finish": finish,
    }
    return Case(
        protocol, rig, current_max_A=current_max, field_max_T=field_max,
        ramp_max_T_per_s=hardware["ramp_rate"],
        angle_range_deg=(hardware["angle_min"], hardware["angle_max"]),
        temperature_range_K=(temperature_low, temperature_high),
    )


# -- running the command line in process -------------------------------------------------------
@dataclass
class Outcome:
    code: int
    out: str
    err: str


@dataclass
class Spy:
    """What the command did behind the CLI: VISA sessions opened, simulated worlds built."""

    managers: int = 0
    worlds: list[Any] = field(default_factory=list)


@contextlib.contextmanager
def spying() -> Iterator[Spy]:
    import pyvisa.highlevel

    from sim_instruments.world import SimulatedWorld

    spy = Spy()
    # Hooks on the classes themselves, not on a module's name for them: every way to a
    # resource manager (pyvisa.ResourceManager, pyvisa.highlevel...) goes through its
    # __new__, and every simulated rig builds its SimulatedWorld, however it was imported.
    real_new = pyvisa.highlevel.ResourceManager.__new__
    real_init = SimulatedWorld.__init__

    def counting_new(cls: type, *args: Any, **kwargs: Any) -> Any:
        spy.managers += 1
        return real_new(cls, *args, **kwargs)

    def keeping_world(world: SimulatedWorld, *args: Any, **kwargs: Any) -> None:
        real_init(world, *args, **kwargs)
        spy.worlds.append(world)

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(pyvisa.highlevel.ResourceManager, "__new__", counting_new)
        patch.setattr(SimulatedWorld, "__init__", keeping_world)
        yield spy


def flipsweep(argv: list[str]) -> Outcome:
    from acquire.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return Outcome(code, out.getvalue(), err.getvalue())


def write_yaml(folder: Path, name: str, data: dict[str, Any]) -> Path:
    path = folder / name
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def assert_refused_cleanly(outcome: Outcome, spy: Spy, files: tuple[Path, ...]) -> None:
    """Exit 2 means: one line, naming the file at fault, no traceback, no VISA session."""
    lines = outcome.err.splitlines()
    assert outcome.code == 2, outcome
    assert len(lines) == 1, lines
    assert "Traceback" not in outcome.err and "Traceback" not in outcome.out
    assert any(str(path) in lines[0] for path in files), lines[0]
    assert spy.managers == 0, "a refused input must not open any VISA resource manager"


def dry_run(protocol: Path, rig: Path, out: Path) -> tuple[Outcome, Spy]:
    with spying() as spy:
        ran = flipsweep(["run", str(protocol), "--rig", str(rig), "--simulate",
                         "--out", str(out), "--quiet"])
    return ran, spy


def _yaml_dump(case: Case) -> str:
    return (yaml.safe_dump(case.protocol, sort_keys=False) + "---\n"
            + yaml.safe_dump(case.rig, sort_keys=False))


# -- property 1: a valid protocol keeps every instrument within every limit --------------------
def assert_within_limits(world: Any, case: Case, text_rounding: bool = True) -> None:
    """`text_rounding=False`: no allowance for the known rounding of command text."""
    field_rel = FIELD_TEXT_REL if text_rounding else REL
    angle_abs = ANGLE_TEXT_DEG if text_rounding else 1e-9
    largest, span = world.extremes.largest, world.extremes.span
    assert not world.extremes.refused, f"an instrument refused {world.extremes.refused}"
    if (current := largest.get("current_A")) is not None:
        assert current <= case.current_max_A * (1 + REL), (
            f"source asked for {current!r} A, limit {case.current_max_A!r} A")
    for name, value in (("field target", largest.get("field_target_T")),
                        ("field readback", largest.get("field_read_T"))):
        if value is not None:
            assert value <= case.field_max_T * (1 + field_rel), (
                f"{name} {value!r} T, limit {case.field_max_T!r} T")
    if (rate := largest.get("field_rate_T_per_s")) is not None:
        assert rate <= case.ramp_max_T_per_s * (1 + field_rel), (
            f"field ramp rate {rate!r} T/s, limit {case.ramp_max_T_per_s!r} T/s")
    low, high = case.angle_range_deg
    for name, reached in (("rotator target", span.get("angle_target_deg")),
                          ("rotator position", span.get("angle_read_deg"))):
        if reached is not None:
            assert low - angle_abs <= reached[0] and reached[1] <= high + angle_abs, (
                f"{name} reached {reached} deg, range {low}..{high} deg")
    if (setpoints := span.get("temperature_setpoint_K")) is not None:
        low, high = case.temperature_range_K
        lowest, highest = setpoints
        assert low - ABS_K <= lowest and highest <= high + ABS_K, (
            f"temperature setpoints {lowest}..{highest} K, allowed {low}..{high} K")


def check_then_dry_run(case: Case) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        protocol = write_yaml(folder, "protocol.yaml", case.protocol)
        rig = write_yaml(folder, "rig.yaml", case.rig)
        with spying() as spy:
            checked = flipsweep(["check", str(protocol), "--rig", str(rig)])
        event("check exit", checked.code)
        if checked.code != 0:
            event("refused for", checked.err.split(": ", 2)[-1].split(" -- ")[0][:50])
            assert_refused_cleanly(checked, spy, (protocol, rig))
            # The run refuses the same input before it opens anything.
            ran, spy = dry_run(protocol, rig, folder / "run")
            assert_refused_cleanly(ran, spy, (protocol, rig))
            assert not (folder / "run").exists()
            return
        ran, spy = dry_run(protocol, rig, folder / "run")
        assert len(spy.worlds) == 1, ran
        # A protocol check accepted runs to the end on instruments that behave.
        assert ran.code == 0, (ran.err, _yaml_dump(case))
        assert_within_limits(spy.worlds[0], case)


# Each example is one check plus, for about half of them, one dry run of a few points
# (typically 0.01-0.3 s; at most 5 values per loop, with `return`); 250 examples keep this
# test near 25 s on two cores. The slow sweep looks four times further (~2 min): it is the
# one that reliably finds the rarest planted fault tried (check forgetting the default
# backlash, which only matters for a target within 2 deg of the stage's minimum reached
# from above).
PROPERTY_SETTINGS = {"deadline": None,
                     "suppress_health_check": [HealthCheck.too_slow, HealthCheck.data_too_large]}


@settings(max_examples=250, **PROPERTY_SETTINGS)
@given(case=cases())
def test_a_valid_protocol_never_takes_an_instrument_past_a_limit(case: Case) -> None:
    check_then_dry_run(case)


@pytest.mark.slow
@settings(max_examples=1000, **PROPERTY_SETTINGS)
@given(case=cases())
def test_a_valid_protocol_never_takes_an_instrument_past_a_limit_wide(case: Case) -> None:
    check_then_dry_run(case)


def test_the_record_sees_an_excess_when_one_is_sent() -> None:
    """The property above can fail: a world told more than a limit reports it."""
    from acquire.runtime.clock import VirtualClock
    from drivers.rig import Rig
    from sim_instruments.roles import build_world

    class Flat:
        def apply_field(self, field_T: float, angle_deg: float) -> None: ...

        def expected(self, probe: str, current_A: float, temperature_K: float) -> Any:
            return type("R", (), {"resistance_ohm": 100.0})()

    rig = Rig.model_validate({"name": "r", "instruments": {
        "source": {"role": "current_source", "resource": "GPIB0::1::INSTR"},
        "magnet": {"role": "field", "resource": "GPIB0::2::INSTR"},
        "stage": {"role": "rotator", "resource": "GPIB0::3::INSTR"},
        "cryo": {"role": "temperature", "resource": "GPIB0::4::INSTR"}}})
    world = build_world(VirtualClock(), Flat(), rig)
    source, magnet, stage, cryo = (world.instruments[name]
                                   for name in ("source", "magnet", "stage", "cryo"))
    for amperes in (1e-3, -3e-3, 2e-3):
        source.set_current(amperes)  # type: ignore[attr-defined]
    magnet.set_target(-1.5)  # type: ignore[attr-defined]
    magnet.set_rate(0.02)  # type: ignore[attr-defined]
    stage.move(-3.0)  # type: ignore[attr-defined]
    stage.move(200.0)  # type: ignore[attr-defined]
    cryo.set_setpoint(5.0)  # type: ignore[attr-defined]
    case = Case({}, {}, current_max_A=2.5e-3, field_max_T=2.0, ramp_max_T_per_s=0.05,
                angle_range_deg=(-10.0, 370.0), temperature_range_K=(2.0, 400.0))
    with pytest.raises(AssertionError, match=r"source asked for 0\.003 A"):
        assert_within_limits(world, case)
    assert_within_limits(world, dataclasses.replace(case, current_max_A=3e-3))  # all within
    for bad, match in (({"field_max_T": 1.0}, "field target"),
                       ({"ramp_max_T_per_s": 0.01}, "ramp rate"),
                       ({"angle_range_deg": (0.0, 370.0)}, "rotator target"),
                       ({"temperature_range_K": (10.0, 400.0)}, "temperature setpoints")):
        strict = dataclasses.replace(case, current_max_A=1.0, **bad)
        with pytest.raises(AssertionError, match=match):
            assert_within_limits(world, strict)


# -- property 2: a broken file fails with exit 2 and one line ----------------------------------
VALID_PROTOCOL: dict[str, Any] = {
    "name": "mutation base",
    "description": "all four axes, every section",
    "sample": {"id": "prop-2", "stack": "NiFe 4 nm / Pt 5 nm",
               "channel": {"length": "40 um", "width": "5 um"},
               "layers": [{"name": "NiFe", "thickness": "4 nm", "resistivity": "40 uohm*cm"},
                          {"name": "Pt", "thickness": "5 nm", "resistivity": "30 uohm*cm",
                           "carrier": True}]},
    "rotation_plane": "xy",
    "loops": [{"axis": "temperature", "values": ["300 K"]},
              {"axis": "field", "start": "0.1 T", "stop": "0.3 T", "step": "0.1 T"},
              {"axis": "angle", "start": "0 deg", "stop": "90 deg", "num": 3,
               "alternate_direction": True},
              {"axis": "current", "values": ["1 mA", "2 mA"], "return": True}],
    "alternation": {"pattern": "+0-", "cycles": 2, "settle": "20 ms"},
    "readings": {"per_step": 1, "channels": ["vxx", "vxy"]},
    "waits": {"field": {"tolerance": "1 mT", "hold": "2 s", "timeout": "10 min"},
              "temperature": {"tolerance": "50 mK", "hold": "60 s", "timeout": "30 min"},
              "angle": {"tolerance": "0.05 deg", "settle": "0.5 s"}},
    "limits": {"current": "5 mA", "current_density": "1.6e11 A/m^2", "field": "1 T",
               "temperature_max": "350 K"},
    "finish": {"current": "off", "field": "zero", "temperature": "hold"},
    "on_problem": {"compliance": "retry", "instrument_error": "retry",
                   "wait_timeout": "skip", "retries": 2},
}
VALID_RIG: dict[str, Any] = {
    "name": "mutation rig",
    "visa_library": "@sim",
    "mains_frequency": "50 Hz",
    "instruments": {
        "source": {"role": "current_source", "resource": "GPIB0::5::INSTR",
                   "compliance": "8 V", "limits": {"current": "20 mA"}},
        "vxx": {"role": "voltmeter", "resource": "GPIB0::21::INSTR", "nplc": 1,
                "probe": "longitudinal"},
        "vxy": {"role": "voltmeter", "resource": "GPIB0::22::INSTR", "nplc": 1,
                "probe": "transverse"},
        "magnet": {"role": "field", "resource": "GPIB0::14::INSTR", "ramp_rate": "1 T/min",
                   "limits": {"field": "2 T", "ramp_rate": "1 T/min"}},
        "stage": {"role": "rotator", "resource": "ASRL3::INSTR", "speed": "10 deg/s",
                  "backlash": "2 deg", "limits": {"min": "-10 deg", "max": "370 deg"}},
        "cryo": {"role": "temperature", "resource": "GPIB0::17::INSTR", "rate": "5 K/min",
                 "limits": {"min": "1.6 K", "max": "330 K"}},
    },
    "simulation": {"spin_hall_sign": 1, "start_temperature_K": 300},
}

Path_ = tuple[str | int, ...]


def _paths(node: Any, here: Path_ = ()) -> Iterator[Path_]:
    """Every key path and list position in a document (the root excluded)."""
    if isinstance(node, dict):
        for key, value in node.items():
            yield (*here, key)
            yield from _paths(value, (*here, key))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield (*here, index)
            yield from _paths(value, (*here, index))


def _parent(document: Any, path: Path_) -> Any:
    for part in path[:-1]:
        document = document[part]
    return document


OTHER_DIMENSION = {"A": "K", "mA": "T", "uA": "deg", "T": "mA", "mT": "s", "K": "mT",
                   "deg": "K", "nm": "V", "um": "K", "s": "T", "ms": "mA", "min": "deg",
                   "V": "A", "Hz": "T", "mK": "mA", "A/m^2": "T", "uohm*cm": "um",
                   "T/min": "K/min", "K/min": "deg/s", "deg/s": "T/min"}
WRONG_TYPES: list[Any] = [None, True, 7, -3, 2.5, "lots", [], ["1 mA", "x"], {}, {"a": 1},
                          "", "5 mA", "1e999 T"]


@st.composite
def mutations(draw: st.DrawFn) -> tuple[dict[str, Any], dict[str, Any], str]:
    """The valid pair with one structural fault in protocol or rig (maybe a harmless one)."""
    protocol, rig = copy.deepcopy(VALID_PROTOCOL), copy.deepcopy(VALID_RIG)
    target = draw(st.sampled_from(["protocol", "rig"]))
    document = protocol if target == "protocol" else rig
    paths = list(_paths(document))
    path = draw(st.sampled_from(paths))
    parent, key = _parent(document, path), path[-1]
    value = parent[key]
    kinds = ["delete", "unknown key", "wrong type"]
    if isinstance(value, str) and " " in value and value.split(" ", 1)[1] in OTHER_DIMENSION:
        kinds += ["no unit", "no unit, a number", "wrong dimension"]
    kind = draw(st.sampled_from(kinds))
    if kind == "delete":
        del parent[key]
    elif kind == "unknown key":
        holder = value if isinstance(value, dict) else parent
        if isinstance(holder, dict):
            holder[draw(st.sampled_from(["stpe", "colour", "unit", "limit", "Current", "x"]))] = 1
        else:
            parent[key] = {"surplus": 1}
    elif kind == "wrong type":
        parent[key] = draw(st.sampled_from(WRONG_TYPES))
    elif kind == "no unit":
        parent[key] = value.split(" ", 1)[0]
    elif kind == "no unit, a number":
        parent[key] = float(value.split(" ", 1)[0])
    else:
        number, unit = value.split(" ", 1)
        parent[key] = f"{number} {OTHER_DIMENSION[unit]}"
    return protocol, rig, f"{target} {kind} at {path}"


# A check and a refused run are ~10-30 ms in process; 250 mutations keep this near 8 s.
@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated=mutations())
def test_a_broken_file_fails_with_exit_2_and_one_line(
    mutated: tuple[dict[str, Any], dict[str, Any], str],
) -> None:
    protocol_data, rig_data, what = mutated
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        protocol = write_yaml(folder, "protocol.yaml", protocol_data)
        rig = write_yaml(folder, "rig.yaml", rig_data)
        with spying() as spy:
            checked = flipsweep(["check", str(protocol), "--rig", str(rig)])
        event(f"{what.split(' at ')[0]}: exit {checked.code}")
        if checked.code == 0:  # the fault was harmless (an optional key deleted, ...)
            assert checked.err == "", what
            return
        assert_refused_cleanly(checked, spy, (protocol, rig))
        ran, spy = dry_run(protocol, rig, folder / "run")
        assert_refused_cleanly(ran, spy, (protocol, rig))
        assert not (folder / "run").exists(), "a refused run leaves no run folder"


def test_the_unmutated_base_pair_is_valid() -> None:
    """Otherwise every mutation above would be refused for the base's own fault."""
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        protocol = write_yaml(folder, "protocol.yaml", VALID_PROTOCOL)
        rig = write_yaml(folder, "rig.yaml", VALID_RIG)
        assert flipsweep(["check", str(protocol), "--rig", str(rig)]).code == 0


# -- once-failing cases: values rounded past a limit by a template's precision -------------
def _pair(loops: list[dict[str, Any]], limits: dict[str, str],
          rig_changes: dict[str, dict[str, Any]]) -> tuple[dict[str, Any], dict[str, Any]]:
    protocol = {"name": "pinned case", "sample": copy.deepcopy(VALID_PROTOCOL["sample"]),
                "loops": loops, "alternation": {"pattern": "+-", "cycles": 1, "settle": "1 ms"},
                "readings": {"per_step": 1, "channels": ["vxx"]},
                "waits": {"field": {"tolerance": "10 mT", "hold": "0.5 s"},
                          "angle": {"settle": "0.1 s"}},
                "limits": limits}
    rig = copy.deepcopy(VALID_RIG)
    for name, changes in rig_changes.items():
        rig["instruments"][name].update(changes)
    return protocol, rig


ROUNDED_PAST_THE_LIMIT = {
    # The simulated rig as shipped: 1 T/min is 0.01666... T/s; the field dialect's
    # "{value:.6g}" sends 0.0166667 T/s, 2e-6 above the magnet's limit.
    "default ramp-rate text": (
        _pair([{"axis": "field", "values": ["0.1 T"]}, {"axis": "current", "values": ["1 mA"]}],
              {"current": "5 mA"}, {}),
        Case({}, {}, current_max_A=5e-3, field_max_T=1.0, ramp_max_T_per_s=1.0 / 60.0),
    ),
    # A rig file's own dialect (a supported feature) with coarse formats: 1.26 mA goes out as
    # 0.0013 A (+3 %), 1.006 T as 1.01 T, a 0.55 T/min ramp as 0.6 T/min (+9 %).
    "coarse dialect in the rig file": (
        _pair([{"axis": "field", "values": ["1.006 T"]},
               {"axis": "current", "values": ["1.26 mA"]}],
              {"current": "1.26 mA"},
              {"source": {"commands": {"set_current": "SOUR:CURR {value:.2g}"}},
               "magnet": {"ramp_rate": "0.55 T/min",
                          "limits": {"field": "1.006 T", "ramp_rate": "0.55 T/min"},
                          "commands": {"set_target": "FLD:GOAL {value:.2f}",
                                       "ramp_rate": "FLD:SLEW {per_minute:.1f}"}}}),
        Case({}, {}, current_max_A=1.26e-3, field_max_T=1.006, ramp_max_T_per_s=0.55 / 60.0),
    ),
    # A stage limit in radians: 6.28319 rad = 360.000269 deg; 360.00026 deg is inside it and
    # goes out as "ROT:ABS 360.0003" (the rotator dialect's 4 decimals), 3e-5 deg outside.
    "rotator limit in rad": (
        _pair([{"axis": "angle", "values": ["360.00026 deg"]},
               {"axis": "current", "values": ["1 mA"]}],
              {"current": "5 mA"},
              {"stage": {"limits": {"min": "-10 deg", "max": "6.28319 rad"}}}),
        Case({}, {}, current_max_A=5e-3, angle_range_deg=(-10.0, 6.28319 * 180.0 / math.pi)),
    ),
}


@pytest.mark.parametrize("name", sorted(ROUNDED_PAST_THE_LIMIT))
def test_command_text_never_rounds_past_a_limit(name: str) -> None:
    """Each case once sent a value past a limit. Now check refuses it (naming the template),
    or the run sends only values within the limits."""
    (protocol_data, rig_data), case = ROUNDED_PAST_THE_LIMIT[name]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        protocol = write_yaml(folder, "protocol.yaml", protocol_data)
        rig = write_yaml(folder, "rig.yaml", rig_data)
        checked = flipsweep(["check", str(protocol), "--rig", str(rig)])
        if checked.code != 0:
            assert checked.code == 2 and "is sent as" in checked.err, checked.err
            assert checked.err.count("\n") == 1
            return
        ran, spy = dry_run(protocol, rig, folder / "run")
        if ran.code != 0:
            raise RuntimeError(ran.err)
        assert_within_limits(spy.worlds[0], case, text_rounding=False)


def test_check_refuses_what_the_dry_run_would_refuse() -> None:
    """An unknown sample-model parameter under the rig's `simulation:` once passed check and
    stopped only the dry run, after its folder was made; both now refuse it up front."""
    rig_data = copy.deepcopy(VALID_RIG)
    rig_data["simulation"]["colour"] = 1
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        protocol = write_yaml(folder, "protocol.yaml", VALID_PROTOCOL)
        rig = write_yaml(folder, "rig.yaml", rig_data)
        with spying() as spy:
            checked = flipsweep(["check", str(protocol), "--rig", str(rig)])
        assert_refused_cleanly(checked, spy, (rig,))
        ran, spy = dry_run(protocol, rig, folder / "run")
        assert_refused_cleanly(ran, spy, (rig,))
        assert not (folder / "run").exists()
