"""Loading rig files: units by role, role-specific keys, the template, rig/protocol pairing."""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from acquire.errors import InputError
from acquire.inputs.load import check_pair, load_protocol, load_rig
from acquire.inputs.pydantic_errors import did_you_mean
from drivers.rig import Rig
from drivers.roles import all_roles, role_named, role_names
from drivers.spec import COMMON_KEYS
from tests.conftest import PROTOCOLS, SIMULATED_RIG

TEMPLATE = PROTOCOLS / "rigs" / "real_rig_template.yaml"
Write = Callable[[str, str], Path]

SOURCE = ('  source: {role: current_source, resource: "GPIB0::5::INSTR", '
          'limits: {current: 20 mA}}\n')
VXX = '  vxx: {role: voltmeter, resource: "GPIB0::21::INSTR"}\n'


def rig_text(*lines: str) -> str:
    return "name: test rig\ninstruments:\n" + "".join(lines)


def test_simulated_rig_values_in_si() -> None:
    loaded = load_rig(SIMULATED_RIG)
    rig = loaded.rig
    assert rig.visa_library == "@sim"
    assert rig.mains_frequency == pytest.approx(50.0)
    source = rig.instruments["source"]
    assert (source.role, source.compliance, source.limits.current) == (
        "current_source", pytest.approx(8.0), pytest.approx(20e-3)
    )
    magnet = rig.instruments["magnet"]
    assert magnet.limits.field == pytest.approx(2.0)
    assert magnet.limits.ramp_rate == pytest.approx(1 / 60)  # 1 T/min in T/s
    stage = rig.instruments["stage"]
    assert (stage.speed, stage.backlash) == (pytest.approx(10.0), pytest.approx(2.0))
    assert rig.instruments["cryo"].rate == pytest.approx(5 / 60)  # 5 K/min in K/s
    # min/max are read by role: degrees for the rotator, kelvin for the controller
    assert (stage.limits.min, stage.limits.max) == (pytest.approx(-10.0), pytest.approx(370.0))
    cryo = rig.instruments["cryo"]
    assert (cryo.limits.min, cryo.limits.max) == (pytest.approx(1.6), pytest.approx(330.0))
    assert set(rig.of_role(role_named("voltmeter"))) == {"vxx", "vxy"}


def test_rig_extends_a_base_rig(write: Write) -> None:
    write("base.yaml", SIMULATED_RIG.read_text())
    child = write("child.yaml", "extends: base.yaml\nname: bench rig\nvisa_library: '@py'\n"
                                "instruments: {magnet: {ramp_rate: 0.5 T/min}}\n")
    rig = load_rig(child).rig
    assert rig.name == "bench rig" and rig.visa_library == "@py"
    assert rig.instruments["magnet"].ramp_rate == pytest.approx(0.5 / 60)
    assert rig.instruments["magnet"].limits.field == pytest.approx(2.0)  # kept from the base


@pytest.mark.parametrize(
    "text, expect, key",
    [
        (rig_text(SOURCE, VXX.replace("}", ", speed: 1 deg/s}")),
         "'speed' does not apply to a voltmeter", ("instruments", "vxx", "speed")),
        (rig_text(SOURCE, '  m: {role: field, resource: "GPIB0::14::INSTR", '
                          'limits: {field: 1 T, ramp_rate: 1 T/min, current: 1 A}}\n'),
         "limit 'current' does not apply to a field", ("instruments", "m", "limits", "current")),
        (rig_text(SOURCE, '  s: {role: rotator, resource: "ASRL1::INSTR", '
                          'limits: {min: 10 K, max: 20 K}}\n'),
         "is not an angle", ("instruments", "s", "limits", "min")),
        (rig_text(SOURCE, '  t: {role: temperature, resource: "ASRL1::INSTR", '
                          'limits: {min: 0 deg, max: 90 deg}}\n'),
         "is not a temperature", ("instruments", "t", "limits", "min")),
        (rig_text(SOURCE, '  t: {role: temperature, resource: "ASRL1::INSTR"}\n'
                          '  u: {role: temperature, resource: "ASRL2::INSTR"}\n'),
         "more than one temperature", ("instruments",)),
    ],
)
def test_role_checks(write: Write, text: str, expect: str, key: tuple) -> None:
    with pytest.raises(InputError) as caught:
        load_rig(write("rig.yaml", text))
    assert expect in caught.value.problem
    assert caught.value.key == key


def test_every_role_is_one_spec_model_with_its_role_name() -> None:
    # The registry and the models must agree, or an entry could never be written.
    for role in all_roles():
        assert role.spec.model_fields["role"].annotation.__args__ == (role.name,)
        assert not (role.setting_keys & COMMON_KEYS), role.name


# --- the template for a real rig --------------------------------------------------------------


def filled_template(folder: Path) -> Path:
    """The template with each placeholder address filled in, as a user would."""
    text = TEMPLATE.read_text(encoding="utf-8")
    for number in (12, 7, 8, 3):
        text = text.replace("GPIB0::<address>::INSTR", f"GPIB0::{number}::INSTR", 1)
    text = text.replace("<serial port>", "/dev/ttyUSB0").replace("<host>", "10.0.0.21")
    path = folder / "my_rig.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_template_as_shipped_is_refused_so_nothing_is_contacted(
    cli: Callable[..., Any], no_visa: list
) -> None:
    for command in (["check", str(PROTOCOLS / "base.yaml"), "--rig", str(TEMPLATE)],
                    ["instruments", "--rig", str(TEMPLATE)]):
        result = cli(command)
        assert result.code == 2
        assert "placeholder" in result.err and " instruments.source.resource: " in result.err
    assert no_visa == []


def test_template_loads_and_uses_pyvisa_py(tmp_path: Path) -> None:
    rig = load_rig(filled_template(tmp_path)).rig
    assert rig.visa_library == "@py"
    assert {spec.role for spec in rig.instruments.values()} == set(role_names())
    assert not rig.simulation


def test_template_explains_every_key() -> None:
    text = TEMPLATE.read_text(encoding="utf-8")
    comments = "\n".join(line for line in text.splitlines() if line.lstrip().startswith("#"))
    keys = set(Rig.model_fields) | {
        key for role in all_roles() for key in (*role.spec.model_fields, *role.limit_keys)}
    for key in sorted(keys):
        assert re.search(rf"\b{key}\b", comments), f"the template's comments never explain {key!r}"


def test_template_pairs_with_every_example_protocol(tmp_path: Path) -> None:
    rig = load_rig(filled_template(tmp_path))
    for path in sorted(PROTOCOLS.glob("*.yaml")):
        check_pair(load_protocol(path), rig)


# --- protocol and rig together ----------------------------------------------------------------


def test_a_swept_axis_needs_its_instrument(
    write: Write, make_protocol: Callable[..., Path]
) -> None:
    rig = load_rig(write("rig.yaml", rig_text(SOURCE, VXX)))
    protocol = load_protocol(make_protocol("{axis: angle, values: [0 deg, 90 deg]}",
                                           "{axis: current, values: [1 mA]}"))
    with pytest.raises(InputError) as caught:
        check_pair(protocol, rig)
    assert caught.value.key == ("loops", 0, "axis")
    assert "no rotator" in caught.value.problem


def test_a_finish_temperature_needs_a_controller(
    write: Write, make_protocol: Callable[..., Path]
) -> None:
    rig = load_rig(write("rig.yaml", rig_text(SOURCE, VXX)))
    protocol = load_protocol(make_protocol("{axis: current, values: [1 mA]}",
                                           finish="{temperature: 300 K}"))
    with pytest.raises(InputError) as caught:
        check_pair(protocol, rig)
    assert caught.value.key == ("finish", "temperature")


def test_did_you_mean() -> None:
    assert did_you_mean("voltmetre", role_names()) == "did you mean 'voltmeter'?"
    assert did_you_mean("vx", ["vxx", "vxy", "magnet"]) == "did you mean 'vxx' or 'vxy'?"
    assert did_you_mean("qqqq", role_names()) is None
