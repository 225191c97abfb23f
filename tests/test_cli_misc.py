"""Small command-line behaviours: instrument survey, a closed pipe, status of a finished run."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from acquire.cli import main

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"


def test_instruments_lists_every_rig_instrument_with_its_identity(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["instruments", "--rig", str(RIG)]) == 0
    lines = capsys.readouterr().out.splitlines()
    names = [line.split()[0] for line in lines]
    assert names == ["source", "vxx", "vxy", "magnet", "stage", "cryo"]
    # The simulated instruments identify themselves by role, never by a maker or model.
    assert all("flipsweep-sim" in line for line in lines)


def test_show_into_a_closed_pipe_is_not_an_error() -> None:
    command = (
        f"{sys.executable} -m acquire.cli check {ROOT / 'protocols' / 'angle_scan.yaml'} --show"
        " | head -n 1"
    )
    result = subprocess.run(command, shell=True, capture_output=True, text=True, cwd=ROOT,
                            timeout=60)
    assert result.stdout.startswith("name:")
    assert "error" not in result.stderr


def test_status_of_a_finished_run(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "run"
    assert main(["run", str(ROOT / "protocols" / "current_ladder.yaml"), "--rig", str(RIG),
                 "--simulate", "--out", str(out), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["status", str(out)]) == 0
    shown = capsys.readouterr().out
    assert "state      done" in shown
    assert "16/16 points (100%)" in shown
    assert "last point 15" in shown


def test_status_of_a_folder_that_is_not_a_run(tmp_path: Path,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["status", str(tmp_path)]) == 2
    assert "not a flipsweep run folder" in capsys.readouterr().err


def test_unwritable_output_folder_is_refused_before_any_instrument(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    import pyvisa

    def no_visa(*args: object, **kwargs: object) -> None:
        raise AssertionError("an instrument was opened")

    monkeypatch.setattr(pyvisa, "ResourceManager", no_visa)
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    code = main(["run", str(ROOT / "protocols" / "base.yaml"), "--rig", str(RIG), "--simulate",
                 "--out", str(blocker / "run"), "--quiet"])
    assert code == 2
    error = capsys.readouterr().err
    assert "cannot be written" in error and error.count("\n") == 1


def test_too_little_disk_space_is_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    import shutil
    from collections import namedtuple

    usage = namedtuple("usage", "total used free")
    monkeypatch.setattr(shutil, "disk_usage", lambda path: usage(10**9, 10**9 - 1000, 1000))
    code = main(["run", str(ROOT / "protocols" / "angle_scan.yaml"), "--rig", str(RIG),
                 "--simulate", "--out", str(tmp_path / "run"), "--quiet"])
    assert code == 2
    assert "MB free" in capsys.readouterr().err
    assert not (tmp_path / "run" / "readings.csv").exists()


def test_the_built_in_simulated_rig_implies_simulate(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "run"
    assert main(["run", str(ROOT / "protocols" / "base.yaml"), "--rig", str(RIG), "--seed", "2",
                 "--out", str(out), "--quiet"]) == 0
    assert "running with --simulate" in capsys.readouterr().out
    import json

    assert json.loads((out / "run.json").read_text())["options"]["simulate"] is True
