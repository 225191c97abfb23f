"""The estimate: counts, a breakdown that adds up, and each part computed here independently."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from acquire.inputs.load import check_pair, load_protocol, load_rig
from acquire.plan.estimate import Estimate, estimate, format_duration
from tests.conftest import PROTOCOLS, SIMULATED_RIG, CliResult

MakeProtocol = Callable[..., Path]
Write = Callable[[str, str], Path]

# A rig with round numbers and no transaction time, so each part of the estimate is simple.
TIMING_RIG = """name: timing rig
mains_frequency: 60 Hz
instruments:
  source: {role: current_source, resource: "GPIB0::1::INSTR", latency: 0 s,
           limits: {current: 20 mA}}
  vxx: {role: voltmeter, resource: "GPIB0::2::INSTR", nplc: 10, latency: 0 s}
  vxy: {role: voltmeter, resource: "GPIB0::3::INSTR", nplc: 1, latency: 0 s}
  magnet: {role: field, resource: "GPIB0::4::INSTR", latency: 0 s, ramp_rate: 0.5 T/min,
           limits: {field: 2 T, ramp_rate: 1 T/min}}
  stage: {role: rotator, resource: "GPIB0::5::INSTR", latency: 0 s, speed: 5 deg/s,
          backlash: 1.5 deg, limits: {min: -10 deg, max: 370 deg}}
  cryo: {role: temperature, resource: "GPIB0::6::INSTR", latency: 0 s, rate: 4 K/min,
         limits: {min: 1.6 K, max: 330 K}}
"""
QUIET_WAITS = "{field: {hold: 0 s}, angle: {settle: 0 s}, temperature: {hold: 0 s}}"


@pytest.fixture
def timing_rig(write: Write) -> Path:
    return write("timing_rig.yaml", TIMING_RIG)


def run_estimate(protocol: Path, rig: Path | None) -> Estimate:
    loaded = load_protocol(protocol)
    loaded_rig = load_rig(rig) if rig else None
    if loaded_rig:
        check_pair(loaded, loaded_rig)
    return estimate(loaded, loaded_rig)


EXAMPLES = sorted(PROTOCOLS.glob("*.yaml"))


@pytest.mark.parametrize("rig", [SIMULATED_RIG, None], ids=["simulated rig", "no rig"])
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_breakdown_adds_up_to_the_total(path: Path, rig: Path | None) -> None:
    result = run_estimate(path, rig)
    assert result.duration_s > 0
    assert all(seconds >= 0 for seconds in result.breakdown_s.values())
    assert sum(result.breakdown_s.values()) == pytest.approx(result.duration_s, rel=1e-12)


def test_field_ramp_time_is_field_change_over_rate(
    make_protocol: MakeProtocol, timing_rig: Path
) -> None:
    path = make_protocol("{axis: field, start: -40 mT, stop: 40 mT, step: 20 mT, return: true}",
                         "{axis: current, values: [1 mA]}",
                         waits="{field: {hold: 3 s}}")
    result = run_estimate(path, timing_rig)
    # From zero: |0 - (-40 mT)| + 80 mT up + 80 mT down = 0.2 T at 0.5 T/min (0.5/60 T/s)
    assert result.breakdown_s["field ramps"] == pytest.approx(0.2 / (0.5 / 60), rel=1e-9)
    # nine field values, each a new setpoint, each held 3 s
    assert result.breakdown_s["field holds"] == pytest.approx(9 * 3.0, rel=1e-12)


@pytest.mark.parametrize(
    "approach, expected_s",
    [
        # speed 5 deg/s, backlash 1.5 deg: a move against the approach side adds 2 * 1.5 deg.
        # positive approach: 0->90 with it (18 s), 90->45 against ((45 + 3) / 5 = 9.6 s),
        # 45->60 with it (3 s)
        ("positive", 18 + 9.6 + 3),
        # negative approach: 0->90 against ((90 + 3) / 5 = 18.6 s), 90->45 with it (9 s),
        # 45->60 against ((15 + 3) / 5 = 3.6 s)
        ("negative", 18.6 + 9 + 3.6),
    ],
)
def test_rotations_include_the_backlash_approach(
    approach: str, expected_s: float, make_protocol: MakeProtocol, write: Write
) -> None:
    rig = write("rig.yaml", TIMING_RIG.replace("backlash: 1.5 deg,",
                                                f"backlash: 1.5 deg, approach: {approach},"))
    path = make_protocol("{axis: angle, values: [0 deg, 90 deg, 45 deg, 60 deg]}",
                         "{axis: current, values: [1 mA]}", waits=QUIET_WAITS)
    assert run_estimate(path, rig).breakdown_s["rotations"] == pytest.approx(expected_s, rel=1e-9)


def test_integration_is_nplc_over_mains_per_reading(
    make_protocol: MakeProtocol, timing_rig: Path
) -> None:
    path = make_protocol("{axis: current, values: [1 mA, 2 mA]}",
                         alternation='{pattern: "+0-", cycles: 2, settle: 50 ms}',
                         readings="{per_step: 3, channels: [vxx, vxy]}")
    result = run_estimate(path, timing_rig)
    # 2 points x 2 cycles x 3 steps x 3 readings = 36 readings per channel
    assert result.points == 2
    assert result.readings == 36 * 2
    # vxx: 10 cycles of 60 Hz, vxy: 1 cycle, per reading
    assert result.breakdown_s["integration"] == pytest.approx(36 * (10 / 60 + 1 / 60), rel=1e-12)
    # settle 50 ms after each of the 2 x 2 x 3 current changes
    assert result.breakdown_s["current settling"] == pytest.approx(12 * 0.05, rel=1e-12)
    assert result.breakdown_s["transactions"] == pytest.approx(0.0, abs=1e-12)  # latency 0 s


def test_temperature_changes_at_the_controller_rate(
    make_protocol: MakeProtocol, timing_rig: Path
) -> None:
    path = make_protocol("{axis: temperature, start: 300 K, stop: 100 K, step: 50 K}",
                         "{axis: current, values: [1 mA]}",
                         waits="{temperature: {hold: 90 s}}")
    result = run_estimate(path, timing_rig)
    # 200 K at 4 K/min; the cryostat starts at the first temperature
    assert result.breakdown_s["temperature changes"] == pytest.approx(200 / (4 / 60), rel=1e-9)
    assert result.breakdown_s["temperature holds"] == pytest.approx(5 * 90, rel=1e-12)


def test_counts_and_peak_density(make_protocol: MakeProtocol) -> None:
    path = make_protocol("{axis: field, values: [0.2 T, 1 T]}",
                         "{axis: angle, start: 0 deg, stop: 350 deg, step: 10 deg,"
                         " alternate_direction: true}",
                         "{axis: current, values: [1 mA, 2 mA, 3 mA]}",
                         readings="{per_step: 2, channels: [vxx, vxy]}",
                         alternation='{pattern: "+0-", cycles: 4}')
    result = run_estimate(path, SIMULATED_RIG)
    assert result.points == 2 * 36 * 3
    assert result.readings == 216 * 4 * 3 * 2 * 2
    # 3 mA in the demo stack: 7.5e10 A/m^2 in Pt (worked example in test_limits.py)
    assert result.limits.peak_density_by_layer["Pt"] == pytest.approx(7.5e10, rel=1e-9)


def test_costly_loop_order_gets_advice(make_protocol: MakeProtocol, timing_rig: Path) -> None:
    angle = "{axis: angle, start: 0 deg, stop: 90 deg, step: 45 deg}"
    field = "{axis: field, start: -1 T, stop: 1 T, step: 0.5 T}"
    current = "{axis: current, values: [1 mA]}"
    # Field inside angle: every angle pass ramps -1 T -> 1 T and back, 11 T in all (22 min at
    # 0.5 T/min); field outside: 3 T (6 min) and a few short rotations.
    slow = run_estimate(make_protocol(angle, field, current, file="slow.yaml"), timing_rig)
    assert slow.advice is not None
    order = slow.advice.split(" (outermost")[0]
    assert order.index("field") < order.index("angle")
    fast = run_estimate(make_protocol(field, angle, current, file="fast.yaml"), timing_rig)
    assert fast.advice is None
    assert fast.duration_s < slow.duration_s


def test_estimate_without_a_rig_says_so(make_protocol: MakeProtocol, cli: Callable) -> None:
    result: CliResult = cli(["estimate", str(make_protocol("{axis: current, values: [1 mA]}"))])
    assert result.code == 0
    assert "no rig given" in result.out


def test_estimate_prints_the_peak_power(cli: Callable) -> None:
    result: CliResult = cli(["estimate", str(PROTOCOLS / "angle_scan.yaml")])
    assert result.code == 0
    lines = {line.split("  ")[0]: line for line in result.out.splitlines()}
    current_A = float(lines["peak current"].split()[2]) * 1e-3
    voltage_V = float(lines["peak voltage"].split()[2])
    power_W = float(lines["peak power"].split()[2]) * 1e-3
    # Joule's law, P = I V (textbook), from the two other printed lines; the printed values
    # have three significant digits, so they agree to about 0.5 %.
    assert power_W == pytest.approx(current_A * voltage_V, rel=0.01)


def test_format_duration() -> None:
    assert format_duration(12.34) == "12.3 s"
    assert format_duration(125) == "2 min 05 s"
    assert format_duration(3 * 3600 + 7 * 60 + 20) == "3 h 07 min"
