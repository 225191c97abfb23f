"""Dialects as data: defaults, a rig's overrides and their checks, reply specs."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from acquire.errors import InputError
from acquire.inputs.load import load_rig
from drivers.dialect import dialect_for, role_dialect, validate_dialects
from drivers.replies import ReplyFormatError, reply_parser
from tests.test_drivers_support import make_rig, standard_instruments

# The default templates as the README's table lists them, checked verbatim.
DEFAULTS = {
    "current_source": {"set_current": "SOUR:CURR {value:.9g}", "output_on": "OUTP ON",
                       "output_off": "OUTP OFF", "compliance": "SOUR:VOLT:PROT {value:.6g}",
                       "tripped": "SOUR:VOLT:PROT:TRIP?", "read_current": "SOUR:CURR?"},
    "voltmeter": {"read": "READ?"},
    "field": {"set_target": "FLD:GOAL {value:.6g}", "ramp_rate": "FLD:SLEW {value:.6g}",
              "field": "FLD:NOW?"},
    "rotator": {"move": "ROT:ABS {value:.4f}", "position": "ROT:POS?", "moving": "ROT:MOV?",
                "home": "ROT:HOME"},
    "temperature": {"setpoint": "TEMP:GOAL {value:.4f}", "temperature": "TEMP:NOW?"},
}


@pytest.mark.parametrize("role", sorted(DEFAULTS))
def test_role_defaults_and_the_common_commands(role: str) -> None:
    dialect = role_dialect(role)
    for name, template in DEFAULTS[role].items():
        assert dialect.commands[name] == template
    assert dialect.commands["identify"] == "*IDN?"
    assert dialect.commands["error_query"] == "SYST:ERR?"
    assert dialect.rejected == "ERROR"


def test_rendering_sends_si_values_and_per_minute_rates() -> None:
    source = role_dialect("current_source")
    assert source.render("set_current", -1.5e-3) == "SOUR:CURR -0.0015"
    assert source.render("output_on") == "OUTP ON"
    spec = make_rig({"magnet": {"role": "field", "resource": "GPIB0::14::INSTR",
                                "commands": {"ramp_rate": "RATE {per_minute:.4g}"},
                                "limits": {"field": "1 T", "ramp_rate": "1 T/min"}},
                     "source": standard_instruments()["source"]}).instruments["magnet"]
    assert dialect_for("magnet", spec).render("ramp_rate", 0.5 / 60) == "RATE 0.5"


def _problem(overrides: dict[str, Any]) -> InputError:
    instruments = standard_instruments()
    instruments["source"].update(overrides)
    with pytest.raises(InputError) as raised:
        validate_dialects(make_rig(instruments).instruments)
    return raised.value


def test_unknown_template_name_lists_the_valid_ones() -> None:
    error = _problem({"commands": {"set_curent": "CURR {value}"}})
    assert error.key == ("instruments", "source", "commands", "set_curent")
    assert "set_current" in error.fix and "output_on" in error.fix


@pytest.mark.parametrize("overrides, words", [
    ({"commands": {"set_current": "CURR 1"}}, "no {value}"),
    ({"commands": {"output_on": "OUTP {value}"}}, "sends no number"),
    ({"commands": {"set_current": "CURR {amps}"}}, "{amps}"),
    ({"commands": {"set_current": "CURR {value:d}"}}, "cannot format"),
    ({"commands": {"set_current": ""}}, "cannot be blank"),
    ({"replies": {"read_current": "I=([0-9]+)(A)"}}, "exactly one group"),
    ({"replies": {"tripped": "true=1; false=1"}}, "both true and false"),
    ({"replies": {"error_query": "number"}}, "SCPI"),
    ({"replies": {"output_on": "number"}}, "not a query"),
])
def test_malformed_overrides_are_input_errors(overrides: dict[str, Any], words: str) -> None:
    assert words in str(_problem(overrides))


def test_optional_commands_may_be_blanked() -> None:
    instruments = standard_instruments()
    instruments["source"]["commands"] = {"tripped": "", "error_query": ""}
    dialect = validate_dialects(make_rig(instruments).instruments)["source"]
    assert not dialect.supports("tripped")
    assert not dialect.supports("error_query")


def test_an_error_in_a_rig_file_names_file_and_line(tmp_path: Path) -> None:
    path = tmp_path / "rig.yaml"
    path.write_text(
        "name: r\n"
        "instruments:\n"
        "  source:\n"
        "    role: current_source\n"
        "    resource: GPIB0::1::INSTR\n"
        "    limits: {current: 1 mA}\n"
        "    commands:\n"
        "      level: 'CURR {value}'\n",
        encoding="utf-8",
    )
    # load_rig checks the dialects too, so `flipsweep check --rig` reports it before any run.
    with pytest.raises(InputError) as raised:
        load_rig(path)
    assert raised.value.file == str(path)
    assert raised.value.line == 8
    assert "unknown command template 'level'" in str(raised.value)


@pytest.mark.parametrize("spec, reply, value", [
    ("number", "+1.234000000E-03", 1.234e-3),
    ("V=([-+0-9.Ee]+)", "V=+1.234E-3", 1.234e-3),
    (r"^\s*POS\s+(\S+)\s*deg$", " POS  -12.5 deg", -12.5),
    ("true=1,ON; false=0,OFF", "on", True),
    ("true=MOVING; false=STOPPED", "STOPPED", False),
    ("scpi_error", '-222,"Data out of range"', (-222, "Data out of range")),
    # SCPI-99 vol. 1, SYSTem:ERRor?: an empty queue reads 0,"No error".
    ("scpi_error", '0,"No error"', (0, "No error")),
    ("text", " flipsweep-sim,voltmeter,v,1.0 ", "flipsweep-sim,voltmeter,v,1.0"),
])
def test_reply_specs_parse(spec: str, reply: str, value: object) -> None:
    assert reply_parser(spec).parse(reply) == value


@pytest.mark.parametrize("spec, reply", [
    ("number", "OVLD"), ("V=([-+0-9.Ee]+)", "I=1.0"), ("true=1; false=0", "2"),
    ("scpi_error", "no error"),
])
def test_replies_of_the_wrong_form_are_refused(spec: str, reply: str) -> None:
    with pytest.raises(ReplyFormatError):
        reply_parser(spec).parse(reply)
