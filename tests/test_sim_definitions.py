"""Generated pyvisa-sim definitions: the committed generic rig, error queue, reply writers."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from acquire.errors import InputError
from acquire.inputs.load import load_rig
from acquire.runtime.visa_library import resource_manager_for
from drivers.replies import reply_parser
from sim_instruments.pyvisa_sim_definitions import (
    GENERIC_DEFINITIONS,
    GENERIC_RIG,
    definitions_text,
    setter_pattern,
)
from sim_instruments.reply_text import reply_writer
from tests.test_drivers_support import make_rig, standard_instruments


def test_committed_generic_definitions_are_what_the_dialects_generate() -> None:
    regenerated = definitions_text(load_rig(GENERIC_RIG).rig)
    assert regenerated == GENERIC_DEFINITIONS.read_text(encoding="utf-8"), (
        "regenerate with: python -m sim_instruments.pyvisa_sim_definitions"
    )


def test_identities_name_no_maker_or_model() -> None:
    devices = yaml.safe_load(GENERIC_DEFINITIONS.read_text(encoding="utf-8"))["devices"]
    identities = {name: next(d["r"] for d in device["dialogues"] if d["q"] == "*IDN?")
                  for name, device in devices.items()}
    assert identities["vxx"] == "flipsweep-sim,voltmeter,vxx,1.0"
    assert all(text.split(",")[0] == "flipsweep-sim" for text in identities.values())


def test_unknown_command_gets_the_error_reply_and_a_queue_entry() -> None:
    manager = resource_manager_for("@sim")  # the committed generic rig, static replies
    meter = manager.open_resource("GPIB0::21::INSTR", read_termination="\n",
                                  write_termination="\n")
    try:
        assert meter.query("*IDN?") == "flipsweep-sim,voltmeter,vxx,1.0"
        # SCPI-99 vol. 1 (SYSTem:ERRor?): an empty queue reads 0,"No error".
        assert meter.query("SYST:ERR?") == '0,"No error"'
        assert meter.query("VOLT:BOGUS?") == "ERROR"
        # SCPI-99 vol. 1: -113 "Undefined header", then the queue is empty again.
        assert meter.query("SYST:ERR?") == '-113,"Undefined header"'
        assert meter.query("SYST:ERR?") == '0,"No error"'
    finally:
        meter.close()
        manager.close()


def test_at_sim_with_a_rig_generates_that_rigs_devices() -> None:
    instruments = standard_instruments()
    instruments["vxx"]["commands"] = {"read": "SAMPLE?"}
    manager = resource_manager_for("@sim", make_rig(instruments))
    try:
        meter = manager.open_resource("GPIB0::21::INSTR", read_termination="\n",
                                      write_termination="\n")
        assert float(meter.query("SAMPLE?")) == 0.0
        meter.close()
    finally:
        manager.close()


def test_definitions_file_relative_to_the_rig(tmp_path: Path) -> None:
    (tmp_path / "defs.yaml").write_text(definitions_text(make_rig()), encoding="utf-8")
    manager = resource_manager_for("defs.yaml@sim", base_dir=tmp_path)
    assert "GPIB0::5::INSTR" in manager.list_resources()
    manager.close()
    with pytest.raises(InputError, match="no simulation definitions"):
        resource_manager_for("missing.yaml@sim", base_dir=tmp_path)


def test_setter_patterns_keep_literal_text() -> None:
    assert setter_pattern("SOUR:CURR {value:.9g}") == "SOUR:CURR {}"
    assert setter_pattern("RATE {per_minute:.3f} T/MIN") == "RATE {} T/MIN"
    assert setter_pattern("OUTP ON") == "OUTP ON"


@pytest.mark.parametrize("spec", [
    "number", "V=([-+0-9.Ee]+)", r"^\s*POS\s+([-0-9.]+)\s*deg$", r"READING:\s(\S+)",
])
@pytest.mark.parametrize("value", [1.234e-3, -0.5, 0.0, 371.25])
def test_written_replies_read_back_by_the_drivers_parser(spec: str, value: float) -> None:
    text = reply_writer(spec)(value)
    assert reply_parser(spec).parse(text) == pytest.approx(value, rel=1e-6, abs=1e-12)


def test_patterned_reply_keeps_its_literal_text() -> None:
    assert reply_writer("V=([-+0-9.Ee]+)")(1.5e-3) == "V=+1.500000000E-03"
    assert reply_writer("true=MOVING; false=STOPPED")(True) == "MOVING"


def test_a_pattern_no_reply_can_be_written_for_is_an_input_error() -> None:
    instruments = standard_instruments()
    instruments["vxx"]["replies"] = {"read": "(?:V|U)=([-0-9.]+)"}
    with pytest.raises(InputError) as raised:
        definitions_text(make_rig(instruments))
    assert raised.value.key == ("instruments", "vxx", "replies", "read")
