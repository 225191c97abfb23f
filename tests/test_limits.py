"""Current division in the stack, and every limit: each violation names its loop value, exit 2."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from acquire.inputs.load import load_protocol, load_rig
from acquire.inputs.stack import (
    LayerShare,
    StackGeometry,
    carrier_density_per_ampere,
    channel_resistance,
    current_fractions,
    layer_current_densities,
    sheet_conductance,
)
from acquire.plan.limits import check_limits
from tests.conftest import SIMULATED_RIG, CliResult

Cli = Callable[[list[str]], CliResult]
MakeProtocol = Callable[..., Path]
Write = Callable[[str, str], Path]

# Worked example, by hand (current-divider rule for parallel conductances, as in any circuits
# textbook: branch k carries I * G_k / sum(G)). A layer of thickness t and resistivity rho,
# width w and length L conducts G = w t / (rho L); w and L are common, so share by t / rho.
#   NiFe: t = 4 nm, rho = 40 uOhm cm = 40e-6 Ohm * 1e-2 m = 4e-7 Ohm m ; t/rho = 4e-9/4e-7 = 0.01 S
#   Pt:   t = 5 nm, rho = 30 uOhm cm = 3e-7 Ohm m                     ; t/rho = 5e-9/3e-7 = 1/60 S
#   sum = 1/100 + 1/60 = 8/300 = 2/75 S  ->  sheet resistance 37.5 Ohm
#   Pt share = (1/60) / (2/75) = 75/120 = 0.625 ; NiFe share = 0.375
#   I = 3 mA: I_Pt = 1.875 mA, I_NiFe = 1.125 mA ; width 5 um
#   J_Pt   = 1.875e-3 A / (5e-6 m * 5e-9 m) = 1.875e-3 / 2.5e-14 = 7.5e10 A/m^2
#   J_NiFe = 1.125e-3 A / (5e-6 m * 4e-9 m) = 1.125e-3 / 2.0e-14 = 5.625e10 A/m^2
#   40 um between the probes = 8 squares: R = 37.5 * 8 = 300 Ohm ; 3 mA -> 0.9 V
NIFE = LayerShare("NiFe", 4e-9, 4e-7, False)
PT = LayerShare("Pt", 5e-9, 3e-7, True)
REL = 1e-12


def test_worked_example_current_division() -> None:
    layers = [NIFE, PT]
    assert sheet_conductance(layers) == pytest.approx(2 / 75, rel=REL)
    assert current_fractions(layers) == pytest.approx([0.375, 0.625], rel=REL)
    assert layer_current_densities(3e-3, 5e-6, layers) == pytest.approx([5.625e10, 7.5e10],
                                                                          rel=REL)
    assert carrier_density_per_ampere(5e-6, layers) == pytest.approx(7.5e10 / 3e-3, rel=REL)
    assert channel_resistance(40e-6, 5e-6, layers) == pytest.approx(300.0, rel=REL)


def test_measured_sheet_resistance_sets_the_shares() -> None:
    # With a measured 30 Ohm per square, Pt's share is G_Pt * R_s = (1/60) * 30 = 0.5 (the
    # rest of the conduction is not assigned): J_Pt = 1.5 mA / 2.5e-14 m^2 = 6e10 A/m^2.
    densities = layer_current_densities(3e-3, 5e-6, [NIFE, PT], sheet_resistance_ohm=30.0)
    assert densities[1] == pytest.approx(6e10, rel=REL)
    assert channel_resistance(40e-6, 5e-6, [NIFE, PT], 30.0) == pytest.approx(240.0, rel=REL)


def test_worked_example_from_a_protocol(make_protocol: MakeProtocol) -> None:
    loaded = load_protocol(make_protocol("{axis: current, values: [1 mA, 3 mA]}"))
    geometry = StackGeometry.from_sample(loaded.protocol.sample)
    assert geometry.carrier_name == "Pt"
    assert geometry.densities(3e-3) == pytest.approx({"NiFe": 5.625e10, "Pt": 7.5e10}, rel=1e-9)
    report = check_limits(loaded, load_rig(SIMULATED_RIG))
    assert report.peak_current_A == pytest.approx(3e-3)
    assert report.peak_density_by_layer["Pt"] == pytest.approx(7.5e10, rel=1e-9)
    assert report.expected_peak_voltage_V == pytest.approx(0.9, rel=1e-9)
    assert report.compliance_V == pytest.approx(8.0)  # the simulated rig's


def test_a_single_layer_carries_everything() -> None:
    only = LayerShare("W", 5e-9, 1.2e-6, True)
    # J = I / (w t) = 1e-3 / (4e-6 * 5e-9) = 5e10 A/m^2
    assert layer_current_densities(1e-3, 4e-6, [only]) == pytest.approx([5e10], rel=REL)


# --- each kind of violation -------------------------------------------------------------------

CURRENT = "{axis: current, values: [1 mA]}"

# (loops, protocol sections, expected words, the value as printed, key path of that value)
VIOLATIONS = {
    "sample current": (
        ["{axis: current, values: [1 mA, 3 mA, 6 mA]}"], {},
        "exceeds the sample limit", "6 mA", "loops[0].values[2]"),
    "current density in the carrier": (
        # 4 mA: J_Pt = 4e-3 * 0.625 / 2.5e-14 = 1e11 A/m^2 > 8e10 A/m^2 (worked example above)
        ["{axis: current, values: [2 mA, 4 mA]}"],
        {"limits": "{current: 10 mA, current_density: 8e10 A/m^2}"},
        "in the Pt layer", "4 mA", "loops[0].values[1]"),
    "compliance voltage": (
        # 1 mm between probes = 200 squares * 37.5 Ohm = 7.5 kOhm; 1.2 mA -> 9 V > the 8 V
        ["{axis: current, values: [1.2 mA]}"],
        {"sample": "{id: long-bar, channel: {length: 1 mm, width: 5 um}, layers: [{name: NiFe, "
                   "thickness: 4 nm, resistivity: 40 uohm*cm}, {name: Pt, thickness: 5 nm, "
                   "resistivity: 30 uohm*cm, carrier: true}]}"},
        "compliance", "1.2 mA", "loops[0].values[0]"),
    "rig current": (
        ["{axis: current, values: [25 mA]}"], {"limits": "{current: 50 mA}"},
        "rig's limit", "25 mA", "loops[0].values[0]"),
    "magnet field": (
        ["{axis: field, values: [1 T, -2.5 T]}", CURRENT], {},
        "magnet limit", "-2.5 T", "loops[0].values[1]"),
    "sample field": (
        ["{axis: field, values: [0.1 T, 0.6 T]}", CURRENT],
        {"limits": "{current: 5 mA, field: 0.5 T}"},
        "sample limit", "0.6 T", "loops[0].values[1]"),
    "rotator range": (
        ["{axis: angle, values: [0 deg, 375 deg]}", CURRENT], {},
        "rotator range", "375 deg", "loops[0].values[1]"),
    "rotator backlash overshoot": (
        # -9 deg is inside -10..370, but the approach from below starts at -9 - 2 = -11 deg
        ["{axis: angle, values: [-9 deg, 90 deg]}", CURRENT], {},
        "backlash", "-9 deg", "loops[0].values[0]"),
    "temperature range of the rig": (
        ["{axis: temperature, values: [300 K, 420 K]}", CURRENT], {},
        "outside the range", "420 K", "loops[0].values[1]"),
    "sample temperature": (
        ["{axis: temperature, values: [300 K, 360 K]}", CURRENT],
        {"limits": "{current: 5 mA, temperature_max: 350 K}"},
        "sample limit", "360 K", "loops[0].values[1]"),
}


@pytest.mark.parametrize("kind", VIOLATIONS)
def test_violation_names_the_loop_value_and_exits_2(
    kind: str, make_protocol: MakeProtocol, cli: Cli, no_visa: list
) -> None:
    loops, sections, words, value, key = VIOLATIONS[kind]
    path = make_protocol(*loops, **sections)
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 2, result.out
    assert words in result.err
    assert value in result.err
    assert f" {key}: " in result.err
    assert result.out == ""
    assert no_visa == []


def test_ranges_are_checked_at_every_value_of_a_range(
    make_protocol: MakeProtocol, cli: Cli
) -> None:
    path = make_protocol("{axis: field, start: 0 T, stop: 3 T, step: 0.5 T}", CURRENT)
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 2
    assert "field 2.5 T" in result.err  # the first value over the 2 T magnet
    assert " loops[0]: " in result.err


def test_the_ramp_rate_above_the_magnet_limit(write: Write, make_protocol: MakeProtocol,
                                              cli: Cli) -> None:
    rig = write("rig.yaml", SIMULATED_RIG.read_text().replace(
        "ramp_rate: 1 T/min,\n", "ramp_rate: 1.5 T/min,\n"))
    result = cli(["check", str(make_protocol(CURRENT)), "--rig", str(rig)])
    assert result.code == 2
    assert "instruments.magnet.ramp_rate" in result.err and "1.5 T/min" in result.err


def test_finish_temperature_is_checked(make_protocol: MakeProtocol, cli: Cli) -> None:
    path = make_protocol(CURRENT, finish="{temperature: 350 K}")  # the rig's max is 330 K
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 2 and " finish.temperature: " in result.err
    path = make_protocol(CURRENT, finish="{temperature: 330 K}",
                         limits="{current: 5 mA, temperature_max: 320 K}")
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 2 and "sample limit 320 K" in result.err


# --- the edges are allowed --------------------------------------------------------------------


@pytest.mark.parametrize(
    "loops, sections",
    [
        (["{axis: current, values: [5 mA]}"], {}),  # exactly the sample limit
        (["{axis: current, values: [3.2 mA]}"],  # J_Pt = 3.2e-3 * 0.625 / 2.5e-14 = 8e10
         {"limits": "{current: 10 mA, current_density: 8e10 A/m^2}"}),
        (["{axis: field, values: [-2 T, 2 T]}", CURRENT], {}),  # the magnet's +-2 T
        (["{axis: angle, values: [-8 deg, 370 deg]}", CURRENT], {}),  # -8 - 2 = -10, the min
        (["{axis: temperature, values: [1.6 K, 330 K]}", CURRENT], {}),  # the cryostat range
        # measured 125 Ohm/sq * 8 squares = 1 kOhm; 8 mA -> 8 V, the compliance exactly
        (["{axis: current, values: [8 mA]}"],
         {"limits": "{current: 8 mA}",
          "sample": "{id: bar, sheet_resistance: 125 ohm, channel: {length: 40 um, width: 5 um}, "
                    "layers: [{name: Pt, thickness: 5 nm, resistivity: 30 uohm*cm}]}"}),
    ],
)
def test_values_at_the_limit_pass(loops: list[str], sections: dict[str, str],
                                  make_protocol: MakeProtocol, cli: Cli) -> None:
    result = cli(["check", str(make_protocol(*loops, **sections)), "--rig", str(SIMULATED_RIG)])
    assert result.code == 0, result.err


def test_negative_approach_overshoots_upwards(write: Write, make_protocol: MakeProtocol,
                                              cli: Cli) -> None:
    rig = write("rig.yaml", SIMULATED_RIG.read_text().replace(
        "backlash: 2 deg,", "backlash: 2 deg, approach: negative,"))
    low = make_protocol("{axis: angle, values: [-10 deg]}", CURRENT, file="low.yaml")
    assert cli(["check", str(low), "--rig", str(rig)]).code == 0
    high = make_protocol("{axis: angle, values: [369 deg]}", CURRENT, file="high.yaml")
    result = cli(["check", str(high), "--rig", str(rig)])
    assert result.code == 2 and "369 deg" in result.err


def test_rotator_with_only_a_maximum(write: Write, make_protocol: MakeProtocol, cli: Cli) -> None:
    rig = write("rig.yaml", SIMULATED_RIG.read_text().replace("min: -10 deg, ", ""))
    result = cli(["check", str(make_protocol("{axis: angle, values: [400 deg]}", CURRENT)),
                  "--rig", str(rig)])
    assert result.code == 2, result.err
    assert "-inf..370 deg" in result.err


def test_compliance_headroom_warning(make_protocol: MakeProtocol, cli: Cli) -> None:
    sample = ("{id: bar, channel: {length: 400 um, width: 5 um}, layers: [{name: NiFe, "
              "thickness: 4 nm, resistivity: 40 uohm*cm}, {name: Pt, thickness: 5 nm, "
              "resistivity: 30 uohm*cm, carrier: true}]}")
    # 400 um / 5 um = 80 squares * 37.5 Ohm = 3 kOhm; 2.4 mA -> 7.2 V, 90 % of the rig's 8 V
    # compliance: above the 80 % headroom, below the compliance itself
    path = make_protocol("{axis: current, values: [2.4 mA]}", sample=sample)
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 0
    assert "warning: expected peak voltage 7.2 V" in result.out


def test_without_a_rig_only_the_sample_limits_apply(make_protocol: MakeProtocol,
                                                    cli: Cli) -> None:
    path = make_protocol("{axis: field, values: [9 T]}", "{axis: current, values: [4 mA]}")
    result = cli(["check", str(path)])
    assert result.code == 0
    assert "rig limits not checked" in result.out
