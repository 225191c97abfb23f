"""A command template cannot send more than the value `check` checked: a rig template whose
rendered number is not the value (or a rate's declared per-minute scaling) is refused when
the rig is loaded, for every role's limited template; and the simulated instruments read the
whole SCPI number as a real instrument does, so a rehearsal shows such a slip too."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest
import yaml

from drivers.dialect import role_dialect, scaling_problem
from drivers.roles import all_roles
from sim_instruments.live import read_sent_number
from sim_instruments.pyvisa_sim_definitions import setter_pattern
from tests.conftest import PROTOCOLS, SIMULATED_RIG, CliResult

# Every (role, template) whose number a limit bounds, and the instrument of the simulated
# rig playing that role.
LIMITED = [(role.name, limit.template) for role in all_roles() for limit in role.template_limits]
RIG_NAMES = {"current_source": "source", "field": "magnet", "rotator": "stage",
             "temperature": "cryo"}
PROTOCOL = PROTOCOLS / "base.yaml"


def rig_with(tmp_path: Path, instrument: str, template: str, text: str) -> Path:
    data = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    data["instruments"][instrument]["commands"] = {template: text}
    path = tmp_path / "rig.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def header_of(role: str, template: str) -> str:
    """The default template's text before its value field (e.g. 'SOUR:CURR ')."""
    return role_dialect(role).commands[template].split("{")[0]


def test_every_role_with_limits_is_covered() -> None:
    assert {role for role, _ in LIMITED} == set(RIG_NAMES)


@pytest.mark.parametrize("role, template", LIMITED)
@pytest.mark.parametrize("slip", ["{value:.6g}E3", "{per_minute:.6g}E3", "1{value:.6g}",
                                  "{value:%}", "{value:,}"])
def test_a_scaled_template_is_refused_at_check(
    role: str, template: str, slip: str, tmp_path: Path,
    cli: Callable[[list[str]], CliResult], no_visa: list,
) -> None:
    instrument = RIG_NAMES[role]
    rig = rig_with(tmp_path, instrument, template, header_of(role, template) + slip)
    result = cli(["check", str(PROTOCOL), "--rig", str(rig)])
    assert result.code == 2, result.out
    lines = result.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert str(rig) in lines[0]
    assert f" instruments.{instrument}.commands.{template}: " in lines[0]
    assert no_visa == []


@pytest.mark.parametrize("role, template", LIMITED)
def test_per_minute_only_on_a_rate(
    role: str, template: str, tmp_path: Path, cli: Callable[[list[str]], CliResult]
) -> None:
    rate = template in role_dialect(role).rates
    instrument = RIG_NAMES[role]
    rig = rig_with(tmp_path, instrument, template,
                   header_of(role, template) + "{per_minute:.6g}")
    result = cli(["check", str(PROTOCOL), "--rig", str(rig)])
    if rate:
        assert result.code == 0, result.err
    else:
        assert result.code == 2
        assert "is not a rate" in result.err and "{per_minute}" in result.err


def test_the_issue_cases_on_the_current_source(
    tmp_path: Path, cli: Callable[[list[str]], CliResult]
) -> None:
    for text, words in (("SOUR:CURR {per_minute:.6g}", "not a rate"),
                        ("SOUR:CURR {value:.6g}E3", "1000 times the value")):
        rig = rig_with(tmp_path, "source", "set_current", text)
        result = cli(["check", str(PROTOCOL), "--rig", str(rig)])
        assert (result.code, result.out) == (2, "")
        assert len(result.err.splitlines()) == 1 and words in result.err


@pytest.mark.parametrize("template", ["SOUR:CURR {value:.9g}", "SOUR:CURR {value:.3e}",
                                      "SOUR:CURR {value:>12.6g}", "SOUR:CURR {value:+.4f}",
                                      "SOUR:CURR {value:.6g} A", "X {value!r};*OPC?"])
def test_plain_values_in_any_float_format_pass(template: str) -> None:
    assert scaling_problem(template, "value") is None


@pytest.mark.parametrize("role", sorted({role for role, _ in LIMITED}))
def test_the_shipped_dialects_pass_their_own_check(role: str) -> None:
    dialect = role_dialect(role)
    for name, field in dialect.value_fields.items():
        if field is not None:
            assert scaling_problem(dialect.commands[name], field) is None, name


# --- the simulated instrument reads the whole number --------------------------------------------


@pytest.mark.parametrize("template, sent, expected", [
    # SCPI-99 vol. 1, decimal numeric program data: the exponent is part of the number
    ("SOUR:CURR {value:.6g}E3", "SOUR:CURR 0.004E3", 4.0),
    ("SOUR:CURR 1{value:.6g}", "SOUR:CURR 10.004", 10.004),
    ("SOUR:CURR {value:.9g}", "SOUR:CURR 0.004", 0.004),
])
def test_the_simulator_reads_the_number_a_real_instrument_reads(
    template: str, sent: str, expected: float
) -> None:
    pattern = setter_pattern(template)
    assert pattern == "SOUR:CURR {}"
    value_text = sent[len("SOUR:CURR "):]  # what pyvisa-sim hands the setter for '{}'
    assert read_sent_number(value_text) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("text", ["0.004 A", "4e", "", "0x10", "1,5"])
def test_the_simulator_refuses_text_that_is_not_one_number(text: str) -> None:
    assert read_sent_number(text) is None
