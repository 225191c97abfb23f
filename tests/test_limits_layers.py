"""The sample's limits in every layer and on power, and the sample model against the device.

Reference numbers are worked by hand with the parallel-resistor model (each layer a resistor
w t_i / (rho_i L) in parallel; J_i = I (t_i/rho_i) / sum_k(t_k/rho_k) / (w t_i); R =
L / (w sum_k t_k/rho_k); P = I^2 R, Joule's law). Tolerance 1e-9 relative: the code and the
hand formula differ only by float round-off and the 15-digit rounding of parsed values.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from types import SimpleNamespace

import pytest

from acquire.errors import InputError
from acquire.inputs.load import load_protocol, load_rig
from acquire.inputs.resistance_check import first_point_warning, sheet_resistance_warning
from acquire.plan.limits import check_limits, current_high
from tests.conftest import SIMULATED_RIG, CliResult

MakeProtocol = Callable[..., Path]
REL = 1e-9
# Thin NiFe of low resistivity (it carries most of the current) under the Pt carrier.
THIN_NIFE = """{id: bar, channel: {length: 40 um, width: 5 um}, layers: [
    {name: NiFe, thickness: 2 nm, resistivity: 10 uohm*cm},
    {name: Pt, thickness: 5 nm, resistivity: 30 uohm*cm, carrier: true}]}"""
W, L = 5e-6, 40e-6
T_NIFE, RHO_NIFE, T_PT, RHO_PT = 2e-9, 10e-8, 5e-9, 30e-8
G_NIFE, G_PT = T_NIFE / RHO_NIFE, T_PT / RHO_PT
J_NIFE_PER_A = G_NIFE / (G_NIFE + G_PT) / (W * T_NIFE)
J_PT_PER_A = G_PT / (G_NIFE + G_PT) / (W * T_PT)
R_MODEL = L / (W * (G_NIFE + G_PT))


def error_of(path: Path) -> InputError:
    with pytest.raises(InputError) as raised:
        check_limits(load_protocol(path), load_rig(SIMULATED_RIG))
    return raised.value


def test_one_density_limit_holds_in_every_layer(make_protocol: MakeProtocol) -> None:
    limit = 8e10
    largest = limit / J_NIFE_PER_A  # the NiFe reaches the limit first
    assert largest < limit / J_PT_PER_A
    below = make_protocol(f"{{axis: current, values: [{largest * 0.999 * 1e3:.6f} mA]}}",
                          sample=THIN_NIFE, limits="{current: 5 mA, current_density: 8e10 A/m^2}")
    check_limits(load_protocol(below), load_rig(SIMULATED_RIG))
    above = make_protocol(f"{{axis: current, values: [{largest * 1.001 * 1e3:.6f} mA]}}",
                          sample=THIN_NIFE, limits="{current: 5 mA, current_density: 8e10 A/m^2}")
    error = error_of(above)
    assert "NiFe layer" in error.problem and "every layer" in error.problem
    assert current_high(load_protocol(below)) == pytest.approx(largest, rel=REL)


def test_per_layer_density_limits_bound_only_the_layers_named(
    make_protocol: MakeProtocol,
) -> None:
    path = make_protocol("{axis: current, values: [1 mA]}", sample=THIN_NIFE,
                         limits="{current: 5 mA, current_density: {Pt: 2e10 A/m^2}}")
    loaded = load_protocol(path)
    assert current_high(loaded) == pytest.approx(2e10 / J_PT_PER_A, rel=REL)
    error = error_of(make_protocol("{axis: current, values: [2 mA]}", sample=THIN_NIFE,
                                   limits="{current: 5 mA, current_density: {Pt: 2e10 A/m^2}}"))
    assert "Pt layer" in error.problem and "every layer" not in error.problem


def test_the_power_limit_is_i_squared_r(make_protocol: MakeProtocol) -> None:
    power = 1e-3
    largest = math.sqrt(power / R_MODEL)
    loaded = load_protocol(make_protocol("{axis: current, values: [0.5 mA]}", sample=THIN_NIFE,
                                         limits="{current: 20 mA, power: 1 mW}"))
    assert current_high(loaded) == pytest.approx(largest, rel=REL)
    report = check_limits(loaded, load_rig(SIMULATED_RIG))
    assert report.peak_power_W == pytest.approx(0.5e-3**2 * R_MODEL, rel=REL)
    too_much = make_protocol(f"{{axis: current, values: [{largest * 1.01 * 1e3:.6f} mA]}}",
                             sample=THIN_NIFE, limits="{current: 20 mA, power: 1 mW}")
    assert "limits.power" in error_of(too_much).problem


def test_a_power_limit_alone_is_a_current_limit(make_protocol: MakeProtocol) -> None:
    path = make_protocol("{axis: current, values: [1 mA]}", limits="{power: 1 mW}")
    assert current_high(load_protocol(path)) is not None


# --- the sample model against the device -------------------------------------------------------


def test_a_sheet_resistance_far_from_the_layers_is_flagged(make_protocol: MakeProtocol) -> None:
    # the layers give 1/(G_NiFe + G_Pt) = 1/(0.02 + 0.01667) = 27.3 ohm per square
    slip = THIN_NIFE.replace("{id: bar,", "{id: bar, sheet_resistance: 27 mohm,")
    loaded = load_protocol(make_protocol("{axis: current, values: [1 mA]}", sample=slip))
    warning = sheet_resistance_warning(loaded.protocol)
    assert warning is not None and "unit" in warning
    close = THIN_NIFE.replace("{id: bar,", "{id: bar, sheet_resistance: 30 ohm,")
    loaded = load_protocol(make_protocol("{axis: current, values: [1 mA]}", sample=close))
    assert sheet_resistance_warning(loaded.protocol) is None


@pytest.mark.parametrize("measured_factor, warned", [(1.25, False), (0.75, False),
                                                     (1.35, True), (0.6, True), (1000.0, True)])
def test_the_first_point_is_compared_with_the_model(
    measured_factor: float, warned: bool, make_protocol: MakeProtocol
) -> None:
    loaded = load_protocol(make_protocol("{axis: current, values: [1 mA]}", sample=THIN_NIFE,
                                         readings="{channels: [vxy, vxx]}"))
    rig = load_rig(SIMULATED_RIG)
    # vxy (transverse) first: its small Hall resistance must not be compared
    result = SimpleNamespace(resistance_ohm=[0.5, R_MODEL * measured_factor])
    warning = first_point_warning(loaded, rig, 0, result)
    assert (warning is not None) is warned
    if warning:
        assert "vxx" in warning
    assert first_point_warning(loaded, rig, 1, result) is None  # the first point only
    assert first_point_warning(loaded, rig, 0, None) is None  # a skipped point


# --- one rounding rule: a limit written like the value admits it -------------------------------


@pytest.mark.parametrize("value, limit", [("20 kOe", "20 kOe"), ("2 T", "20 kG"),
                                          ("20 kOe", "2 T"), ("15.9154943092 kA/m", "0.02 T")])
def test_a_limit_admits_the_same_field_written_alike(
    value: str, limit: str, make_protocol: MakeProtocol, write: Callable[[str, str], Path],
    cli: Callable[[list[str]], CliResult],
) -> None:
    # 1 Oe = 1 G = 1e-4 T exactly (CGS definitions, SI Brochure 8th ed., Table 9); 15.9154943092
    # kA/m x mu0 (CODATA) = 0.0200000000 T to 1e-11, inside the round-off rule (1e-9 relative)
    rig = write("rig.yaml", SIMULATED_RIG.read_text(encoding="utf-8").replace(
        "limits: {field: 2 T,", f"limits: {{field: {limit},"))
    path = make_protocol(f"{{axis: field, values: [-{value}, {value}]}}",
                         "{axis: current, values: [1 mA]}",
                         limits=f"{{current: 5 mA, field: {limit}}}")
    result = cli(["check", str(path), "--rig", str(rig)])
    assert result.code == 0, result.err
