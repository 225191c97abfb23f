"""What the operator sees: the progress line (current activity, one ETA), `instruments`
explaining a failure and leaving serial ports alone, `status` of a stopped run."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest

from acquire.cli.instruments_list import describe_failure
from acquire.runtime.progress import Progress
from acquire.runtime.waits import StabilityWait
from acquire.store.run_folder import RunFolder
from tests.conftest import SIMULATED_RIG, run_cli


class Clock:
    def __init__(self) -> None:
        self.t = 0.0

    def now(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        self.t += seconds


def test_a_wait_says_what_it_is_doing() -> None:
    clock = Clock()
    said: list[str] = []
    waiter = StabilityWait(clock, lambda: None, said.append)
    # A readback that approaches 0.5 from 0.31 in steps of 0.05, then holds.
    values = iter([0.31, 0.36, 0.41, 0.46, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5])
    waiter.until_stable("field", lambda: next(values), 0.5, 0.001, 2.0, 600.0,
                        lambda v: f"{v:.2f}", "T")
    assert said[0] == "ramping field 0.31 -> 0.50 T"
    assert said[3] == "ramping field 0.46 -> 0.50 T"
    assert re.fullmatch(r"waiting for field \d+/2 s stable", said[-1])


def test_eta_comes_from_the_estimate_until_the_pace_is_measured(tmp_path: Path) -> None:
    clock = Clock()
    folder = RunFolder(tmp_path)
    progress = Progress(folder, total_points=10, estimated_s=100.0, clock_now=clock.now,
                        show_bar=False)
    progress.start(0)
    status = json.loads(folder.status_json.read_text())
    assert status["eta_s"] == 100.0 and status["eta_from"] == "estimate"
    progress.activity("ramping field 0.31 -> 0.5 T")
    clock.t = 30.0  # the first point took three times the estimate

    class Outcome:
        class point:
            number = 0
            current_A = 1e-3
        result: Any = None
        flags = ""

    progress.point_done(Outcome())  # type: ignore[arg-type]
    status = json.loads(folder.status_json.read_text())
    assert status["eta_from"] == "measured pace"
    assert status["eta_s"] == pytest.approx(9 * 30.0)
    assert status["activity"] == "ramping field 0.31 -> 0.5 T"


def test_the_progress_line_shows_the_activity_and_one_eta(
    tmp_path: Path, make_protocol: Any, capsys: pytest.CaptureFixture[str]
) -> None:
    protocol = make_protocol("{axis: field, values: [0.1 T, 0.3 T]}",
                             "{axis: current, values: [1 mA, 2 mA]}",
                             alternation="{pattern: '+-', cycles: 2, settle: 1 ms}")
    result = run_cli(["run", str(protocol), "--rig", str(SIMULATED_RIG), "--simulate",
                      "--out", str(tmp_path / "run")])
    assert result.code == 0
    shown = capsys.readouterr().err + result.err
    frames = [frame for frame in re.split(r"[\r\n]", shown) if "pt" in frame and "|" in frame]
    assert frames, shown
    assert all(frame.count("ETA") <= 1 for frame in frames)
    # tqdm's own remaining-time guess ("[00:01<00:03") is not shown beside ours.
    assert not any(re.search(r"\d\d:\d\d<\d\d:\d\d", frame) for frame in frames)
    assert any(frame.startswith("ramping field") for frame in frames)


# -- instruments -----------------------------------------------------------------------------
@pytest.mark.parametrize(("resource", "message", "package"), [
    ("ASRL3::INSTR", "Please install PySerial (>=3.0) to use this resource type.\n"
     "No module named 'serial'", "pyserial (pip install pyserial)"),
    ("GPIB0::5::INSTR", "Please install linux-gpib (Linux) or gpib-ctypes (Windows, Linux) to "
     "use this resource type.\nNo module named 'gpib'", "gpib-ctypes"),
    ("USB0::1::2::SN::INSTR", "Please install PyUSB to use this resource type.\nNo module named "
     "'usb'", "pyusb (pip install pyusb)"),
])
def test_instruments_names_the_error_and_the_package_that_fixes_it(
    resource: str, message: str, package: str
) -> None:
    shown = describe_failure(resource, ValueError(message))
    assert shown.startswith("(no answer: ValueError: Please install")
    assert "\n" not in shown and package in shown


def test_instruments_says_a_timeout_as_it_is() -> None:
    shown = describe_failure("TCPIP0::10.0.0.2::5025::SOCKET", TimeoutError("timed out"))
    assert shown == "(no answer: TimeoutError: timed out)"


def test_instruments_without_a_rig_never_opens_a_serial_port(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    opened: list[str] = []

    class Manager:
        def list_resources(self) -> tuple[str, ...]:
            return ("ASRL/dev/ttyUSB0::INSTR", "TCPIP0::127.0.0.1::9::SOCKET")

        def open_resource(self, resource: str) -> Any:
            opened.append(resource)
            raise ConnectionRefusedError(111, "Connection refused")

    from acquire.runtime import visa_library

    monkeypatch.setattr(visa_library, "resource_manager_for", lambda *args: Manager())
    assert run_cli(["instruments"]).code == 0
    assert opened == ["TCPIP0::127.0.0.1::9::SOCKET"]
    assert run_cli(["instruments", "--probe"]).code == 0
    assert opened[1:] == ["ASRL/dev/ttyUSB0::INSTR", "TCPIP0::127.0.0.1::9::SOCKET"]


def test_instruments_list_of_the_first_call_says_serial_ports_are_left_alone(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    class Manager:
        def list_resources(self) -> tuple[str, ...]:
            return ("ASRL3::INSTR",)

    from acquire.runtime import visa_library

    monkeypatch.setattr(visa_library, "resource_manager_for", lambda *args: Manager())
    result = run_cli(["instruments"])
    assert result.out == "ASRL3::INSTR  (serial port, not opened; --probe asks it for *IDN?)\n"
