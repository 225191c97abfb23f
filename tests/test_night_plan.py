"""A night plan: several protocols in sequence, one folder each, one estimate, one resume, one
notification at the end."""

from __future__ import annotations

import json
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from tests.conftest import run_cli

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def protocols(tmp_path: Path) -> Path:
    folder = tmp_path / "protocols"
    shutil.copytree(ROOT / "protocols", folder)
    return folder


def with_notify(protocol: Path, marker: Path) -> None:
    # Appends one line per call: the test counts the calls.
    script = f"import sys; open({str(marker)!r}, 'a').write(' '.join(sys.argv[1:]) + '\\n')"
    with open(protocol, "a", encoding="utf-8") as handle:
        handle.write(f"notify: [{sys.executable!r}, -c, {script!r}]\n")


def points_of(run: Path) -> pd.DataFrame:
    return pd.read_csv(run / "points.csv")


def test_a_plan_runs_each_protocol_into_its_folder_and_notifies_once(
    protocols: Path, tmp_path: Path
) -> None:
    marker = tmp_path / "notified.txt"
    ladder, series = protocols / "current_ladder.yaml", protocols / "field_series.yaml"
    for protocol in (ladder, series):
        with_notify(protocol, marker)
    night = tmp_path / "night"
    result = run_cli(["run", str(ladder), str(series), "--rig",
                      str(protocols / "rigs" / "simulated.yaml"), "--simulate", "--seed", "1",
                      "--out", str(night), "--quiet", "--notify"])
    assert result.code == 0, result.err
    lines = result.out.splitlines()
    # One combined estimate up front: a line per run, then the plan's total.
    assert lines[0].split() == ["run", "points", "duration"]
    assert lines[1].startswith("01-current_ladder") and lines[2].startswith("02-field_series")
    assert lines[3].startswith("plan") and "(estimate, 2 runs in sequence)" in lines[3]
    assert f"plan {night}: done" in result.out
    for name, expected in (("01-current_ladder", 16), ("02-field_series", None)):
        run = night / name
        record = json.loads((run / "run.json").read_text())
        assert record["history"][-1]["event"] == "done"
        points = points_of(run)
        assert points["point"].nunique() == (expected or record["estimate"]["points"])
    plan = json.loads((night / "plan.json").read_text())
    assert [entry["folder"] for entry in plan["runs"]] == ["01-current_ladder", "02-field_series"]
    assert [entry["event"] for entry in plan["history"]] == ["start", "done"]
    # The runs' own notifications are held back; the plan's one comes at the end.
    assert marker.read_text() == f"done {night}\n"
    status = run_cli(["status", str(night)])
    assert status.code == 0
    assert "01-current_ladder  done, 16/16 points" in status.out


def test_a_bad_protocol_anywhere_in_the_plan_is_refused_before_anything_starts(
    protocols: Path, tmp_path: Path
) -> None:
    bad = protocols / "bad.yaml"
    bad.write_text((protocols / "current_ladder.yaml").read_text().replace(
        "stop: 4 mA", "stop: 40 mA"))
    night = tmp_path / "night"
    result = run_cli(["run", str(protocols / "current_ladder.yaml"), str(bad), "--rig",
                      str(protocols / "rigs" / "simulated.yaml"), "--simulate", "--out",
                      str(night), "--quiet"])
    assert result.code == 2
    assert "bad.yaml" in result.err and result.err.count("\n") == 1
    assert not night.exists()


def test_an_interrupted_plan_is_resumed_whole(protocols: Path, tmp_path: Path) -> None:
    marker = tmp_path / "notified.txt"
    first, second = protocols / "angle_scan.yaml", protocols / "current_ladder.yaml"
    for protocol in (first, second):
        with_notify(protocol, marker)
    night = tmp_path / "night"
    process = subprocess.Popen(
        [sys.executable, "-m", "acquire.cli", "run", str(first), str(second), "--rig",
         str(protocols / "rigs" / "simulated.yaml"), "--simulate", "--seed", "3", "--out",
         str(night), "--quiet", "--notify"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    readings = night / "01-angle_scan" / "readings.csv"
    deadline = time.monotonic() + 60
    while not (readings.exists() and readings.stat().st_size > 2000):
        assert time.monotonic() < deadline and process.poll() is None
        time.sleep(0.01)
    process.send_signal(signal.SIGINT)
    stdout, stderr = process.communicate(timeout=60)
    if process.returncode == 0:
        pytest.skip("the plan finished before the signal arrived")
    assert process.returncode == 130, stderr
    assert f"'flipsweep resume {night}' continues the plan" in stdout
    assert not (night / "02-current_ladder").exists()
    assert marker.read_text() == f"interrupted {night}\n"
    result = run_cli(["resume", str(night), "--quiet"])
    assert result.code == 0, result.err
    assert f"plan {night}: done" in result.out
    assert points_of(night / "01-angle_scan")["point"].nunique() == 216
    assert points_of(night / "02-current_ladder")["point"].nunique() == 16
    assert marker.read_text() == f"interrupted {night}\ndone {night}\n"
    plan = json.loads((night / "plan.json").read_text())
    assert [entry["event"] for entry in plan["history"]] == [
        "start", "interrupted", "resume", "done"]
