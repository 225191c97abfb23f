"""What `check` verifies of a rig without touching anything (addresses, driver modules, VISA
libraries), what a rehearsal runs (any address; the role's driver unless asked), and what
run.json keeps of the files a protocol was merged from."""

from __future__ import annotations

import json
import sys
from collections.abc import Callable
from pathlib import Path

import pytest
import yaml

from acquire.inputs.rig_checks import driver_problem, resource_problem, visa_library_problem
from drivers.rig import Rig
from sim_instruments.pyvisa_sim_definitions import simulator_rig
from tests.conftest import PROTOCOLS, SIMULATED_RIG, CliResult

Cli = Callable[[list[str]], CliResult]
Write = Callable[[str, str], Path]


@pytest.mark.parametrize("resource", [
    "GPIB0::5::INSTR", "GPIB0::30::5::INSTR", "GPIB::1::INSTR", "TCPIP0::10.0.0.21::INSTR",
    "TCPIP0::lab-magnet.local::inst0::INSTR", "TCPIP0::127.0.0.1::5025::SOCKET",
    "ASRL3::INSTR", "ASRL/dev/ttyUSB0::INSTR", "USB0::0x1234::0x5678::SN0001::INSTR",
])
def test_valid_resource_strings_pass(resource: str) -> None:
    assert resource_problem(resource) is None


@pytest.mark.parametrize("resource, words", [
    ("my source", "not a VISA resource string"), ("GPIB0::31::INSTR", "primary address"),
    ("GPIB0::x::INSTR", "primary address"), ("TCPIP0::1.2.3.4::0::SOCKET", "port"),
    ("TCPIP0::<host>::INSTR", "placeholder"),
])
def test_bad_resource_strings_say_what_is_wrong(resource: str, words: str) -> None:
    problem = resource_problem(resource)
    assert problem is not None and words in problem[0]


def test_a_driver_module_is_looked_for_not_imported(tmp_path: Path,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    package = tmp_path / "lab_drivers_for_test"
    package.mkdir()
    marker = tmp_path / "imported"
    # importing either module would leave the marker file behind
    run_me = f"open({str(marker)!r}, 'w').close()\n"
    (package / "__init__.py").write_text(run_me)
    (package / "meters.py").write_text(run_me + "class Meter: pass\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    assert driver_problem("lab_drivers_for_test.meters:Meter") is None
    assert driver_problem("lab_drivers_for_test.nothing:Meter") is not None
    assert driver_problem("lab_drivers_for_test.meters:") is not None
    assert not marker.exists()
    assert "lab_drivers_for_test" not in sys.modules


def test_visa_libraries_are_checked_without_loading(tmp_path: Path) -> None:
    (tmp_path / "defs.yaml").write_text("spec: '1.1'\n")
    for good in ("", "@sim", "@py", "defs.yaml@sim"):
        assert visa_library_problem(good, tmp_path) is None, good
    for bad, words in (("@nosuch", "no VISA backend"), ("missing.yaml@sim", "definitions"),
                       ("/no/libvisa.so", "no VISA library"), ("@no such", "no VISA backend")):
        problem = visa_library_problem(bad, tmp_path)
        assert problem is not None and words in problem[0], bad


# --- the rehearsal ------------------------------------------------------------------------------


def template_like_rig(**simulation: object) -> Rig:
    data = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    data["instruments"]["stage"]["resource"] = "ASRL/dev/ttyUSB0::INSTR"
    data["instruments"]["cryo"]["resource"] = "TCPIP0::cryo.lab.invalid::INSTR"
    data["instruments"]["vxy"]["driver"] = "lab_drivers_never_imported.meters:Meter"
    data["simulation"] = {**data.get("simulation", {}), **simulation}
    return Rig.model_validate(data)


def test_the_simulator_opens_any_address_and_keeps_the_others() -> None:
    rig = template_like_rig()
    served = simulator_rig(rig)
    assert served.instruments["source"].resource == rig.instruments["source"].resource
    stand_in = served.instruments["stage"].resource
    assert stand_in.startswith("ASRL") and stand_in != rig.instruments["stage"].resource
    resources = [spec.resource for spec in served.instruments.values()]
    assert len(set(resources)) == len(resources)


def test_a_rehearsal_uses_the_roles_driver_unless_asked() -> None:
    assert simulator_rig(template_like_rig()).instruments["vxy"].driver is None
    asked = simulator_rig(template_like_rig(own_drivers=True))
    assert asked.instruments["vxy"].driver == "lab_drivers_never_imported.meters:Meter"


def test_a_rehearsal_of_a_serial_and_lan_rig_runs(tmp_path: Path, cli: Cli) -> None:
    data = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    data["instruments"]["stage"]["resource"] = "ASRL/dev/ttyUSB0::INSTR"
    data["instruments"]["cryo"]["resource"] = "TCPIP0::10.0.0.21::INSTR"
    rig = tmp_path / "rig.yaml"
    rig.write_text(yaml.safe_dump(data), encoding="utf-8")
    protocol = tmp_path / "p.yaml"
    protocol.write_text(
        "name: short angle scan\n"
        f"sample: {yaml.safe_load((PROTOCOLS / 'base.yaml').read_text())['sample']}\n"
        "loops:\n  - {axis: temperature, values: [300 K]}\n"
        "  - {axis: angle, values: [0 deg, 90 deg]}\n  - {axis: current, values: [1 mA]}\n"
        "readings: {channels: [vxx]}\nlimits: {current: 5 mA}\n"
        "waits: {temperature: {hold: 1 s}}\n", encoding="utf-8")
    result = cli(["run", str(protocol), "--rig", str(rig), "--simulate", "--quiet",
                  "--out", str(tmp_path / "out")])
    assert result.code == 0, result.err


# --- run.json ----------------------------------------------------------------------------------


def test_run_json_keeps_the_given_files_text_and_only_the_hash_of_a_base(
    tmp_path: Path, write: Write, cli: Cli
) -> None:
    write("base.yaml", (PROTOCOLS / "base.yaml").read_text(encoding="utf-8")
          + "# a comment that stays in the base file\n")
    child = write("child.yaml", "extends: base.yaml\nname: child\n")
    out = tmp_path / "out"
    result = cli(["run", str(child), "--rig", str(SIMULATED_RIG), "--simulate", "--quiet",
                  "--out", str(out)])
    assert result.code == 0, result.err
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    files = {Path(entry["path"]).name: entry for entry in record["protocol"]["files"]}
    assert files["child.yaml"]["text"] == child.read_text(encoding="utf-8")
    assert "text" not in files["base.yaml"] or files["base.yaml"]["text"] is None
    assert "stays in the base file" not in (out / "run.json").read_text(encoding="utf-8")
    assert len(files["base.yaml"]["sha256"]) == 64
    # a changed base is still caught on resume, by its hash
    from acquire.store.run_record import InputRecord

    recorded = InputRecord.model_validate(record["protocol"])
    assert recorded.changed_files() == []
    (tmp_path / "base.yaml").write_text("name: changed\n", encoding="utf-8")
    assert recorded.changed_files() == [files["base.yaml"]["path"]]


def test_a_rehearsal_never_imports_the_rigs_driver_module(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cli: Cli
) -> None:
    package = tmp_path / "lab_meter_for_rehearsal"
    package.mkdir()
    marker = tmp_path / "imported"
    (package / "__init__.py").write_text(f"open({str(marker)!r}, 'w').close()\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    data = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    data["instruments"]["vxx"]["driver"] = "lab_meter_for_rehearsal:Meter"
    rig = tmp_path / "rig.yaml"
    rig.write_text(yaml.safe_dump(data), encoding="utf-8")
    result = cli(["run", str(PROTOCOLS / "base.yaml"), "--rig", str(rig), "--simulate",
                  "--quiet", "--out", str(tmp_path / "out")])
    assert result.code == 0, result.err
    assert not marker.exists()


def test_a_real_run_with_a_bad_driver_class_stops_before_any_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cli: Cli
) -> None:
    package = tmp_path / "lab_meter_without_class"
    package.mkdir()
    (package / "__init__.py").write_text("")
    monkeypatch.syspath_prepend(str(tmp_path))
    data = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    data.pop("visa_library", None)  # a real rig: the run would open these addresses
    data["instruments"]["vxx"]["driver"] = "lab_meter_without_class:Meter"
    rig = tmp_path / "rig.yaml"
    rig.write_text(yaml.safe_dump(data), encoding="utf-8")
    out = tmp_path / "out"
    result = cli(["run", str(PROTOCOLS / "base.yaml"), "--rig", str(rig), "--quiet",
                  "--out", str(out)])
    assert result.code == 2, result.err
    assert "has no class 'Meter'" in result.err and "driver" in result.err
    assert "Traceback" not in result.err
    assert not out.exists()
