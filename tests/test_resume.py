"""A killed or interrupted run resumes in place: nothing lost, nothing measured twice."""

from __future__ import annotations

import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from acquire.cli import main
from acquire.store.run_folder import RunFolder

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
PROTOCOL = ROOT / "protocols" / "angle_scan.yaml"
KEY = ["point", "attempt", "channel", "cycle", "step", "repeat"]


def start(protocol: Path, out: Path, seed: int = 5) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "acquire.cli",
            "run",
            str(protocol),
            "--rig",
            str(RIG),
            "--simulate",
            "--seed",
            str(seed),
            "--out",
            str(out),
            "--quiet",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        cwd=ROOT,
    )


def wait_for_rows(out: Path, process: subprocess.Popen[bytes], timeout_s: float = 60) -> None:
    deadline = time.monotonic() + timeout_s
    readings = out / "readings.csv"
    while time.monotonic() < deadline:
        if readings.exists() and readings.stat().st_size > 2000:
            return
        if process.poll() is not None:
            return
        time.sleep(0.01)
    raise AssertionError("the run never wrote readings")


def assert_complete(out: Path, points_total: int, channels: int, rows_per_point: int) -> None:
    readings = pd.read_csv(out / "readings.csv")
    assert not readings.duplicated(KEY).any(), "a reading was written twice"
    latest = readings.groupby("point")["attempt"].transform("max")
    counts = readings[readings["attempt"] == latest].groupby("point").size()
    assert sorted(counts.index) == list(range(points_total))
    assert (counts == rows_per_point).all()
    points = pd.read_csv(out / "points.csv")
    assert not points.duplicated(["point", "channel"]).any()
    assert len(points) == points_total * channels


def test_kill_minus_nine_at_random_moments_then_resume(tmp_path: Path) -> None:
    # Reference: the uninterrupted run's point set.
    reference = tmp_path / "reference"
    assert (
        main(
            [
                "run",
                str(PROTOCOL),
                "--rig",
                str(RIG),
                "--simulate",
                "--seed",
                "5",
                "--out",
                str(reference),
                "--quiet",
            ]
        )
        == 0
    )
    expected = pd.read_csv(reference / "points.csv")[
        ["point", "channel", "current_A", "angle_deg", "field_T"]
    ]
    chooser = random.Random(20261202)
    for trial in range(10):
        out = tmp_path / f"trial{trial}"
        process = start(PROTOCOL, out)
        wait_for_rows(out, process)
        time.sleep(chooser.uniform(0.0, 0.6))
        process.send_signal(signal.SIGKILL)
        process.wait()
        assert main(["resume", str(out), "--quiet"]) == 0
        assert_complete(out, 216, 2, 3 * 6 * 1 * 2)  # cycles x "+0--0+" x per_step x channels
        got = pd.read_csv(out / "points.csv")[expected.columns]
        pd.testing.assert_frame_equal(got.reset_index(drop=True), expected)
        history = [
            entry["event"] for entry in json.loads((out / "run.json").read_text())["history"]
        ]
        assert history[0] == "start" and "resume" in history and history[-1] == "done"


def test_sigint_stops_safely_and_resume_completes(tmp_path: Path) -> None:
    out = tmp_path / "run"
    process = start(PROTOCOL, out)
    wait_for_rows(out, process)
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=60)
    if process.returncode == 0:
        pytest.skip("the run finished before the signal arrived")
    assert process.returncode == 130, stderr.decode()
    assert b"Traceback" not in stderr
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "interrupted"
    log = (out / "run.log").read_text()
    assert "interrupted" in log
    assert main(["resume", str(out), "--quiet"]) == 0
    assert_complete(out, 216, 2, 36)


def test_truncated_last_line_and_partial_point_are_handled(tmp_path: Path) -> None:
    out = tmp_path / "run"
    protocol = ROOT / "protocols" / "current_ladder.yaml"
    assert (
        main(["run", str(protocol), "--rig", str(RIG), "--simulate", "--out", str(out), "--quiet"])
        == 0
    )
    lines = (out / "readings.csv").read_text().splitlines(keepends=True)
    # Cut the file inside the 10th point's rows, in the middle of a line (a power cut).
    rows_per_point = 3 * 6 * 1 * 2
    cut = 1 + 9 * rows_per_point + 7
    (out / "readings.csv").write_text("".join(lines[:cut]) + lines[cut][:15])
    # Points reach points.csv after their readings: the cut left the first nine (2 channels).
    points = (out / "points.csv").read_text().splitlines(keepends=True)
    (out / "points.csv").write_text("".join(points[:1 + 9 * 2]))
    assert main(["resume", str(out), "--quiet"]) == 0
    assert_complete(out, 16, 2, rows_per_point)
    aside = pd.read_csv(out / "readings.partial.csv")
    assert set(aside["point"]) == {9} and len(aside) == 7  # kept, not deleted


def test_resume_refuses_a_changed_protocol(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "protocols"
    shutil.copytree(ROOT / "protocols", folder)
    protocol = folder / "current_ladder.yaml"
    out = tmp_path / "run"
    assert (
        main(
            [
                "run",
                str(protocol),
                "--rig",
                str(folder / "rigs" / "simulated.yaml"),
                "--simulate",
                "--out",
                str(out),
                "--quiet",
            ]
        )
        == 0
    )
    base = folder / "base.yaml"
    base.write_text(base.read_text().replace("cycles: 3", "cycles: 5"))
    capsys.readouterr()
    assert main(["resume", str(out), "--quiet"]) == 2
    error = capsys.readouterr().err
    assert "base.yaml" in error and "SHA-256" in error
    assert error.count("\n") == 1


def test_status_reports_progress_and_a_dead_process(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "run"
    process = start(PROTOCOL, out)
    wait_for_rows(out, process)
    process.send_signal(signal.SIGKILL)
    process.wait()
    status_file = out / "status.json"
    status = json.loads(status_file.read_text())
    status["updated_utc"] = "2020-01-01T00:00:00+00:00"  # an old heartbeat
    status_file.write_text(json.dumps(status))
    capsys.readouterr()
    assert main(["status", str(out)]) == 0
    shown = capsys.readouterr().out
    assert "state      stopped" in shown and f"'flipsweep resume {out}' continues" in shown
    assert f"/{216} points" in shown
    os.sync()


def test_a_second_process_cannot_take_over_a_running_folder(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "run"
    process = subprocess.Popen(
        [sys.executable, "-m", "acquire.cli", "run", str(PROTOCOL), "--rig", str(RIG),
         "--simulate", "--realtime", "--out", str(out), "--quiet"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=ROOT,
    )
    try:
        deadline = time.monotonic() + 60
        while not (out / "status.json").exists() or not (out / "run.lock").read_text():
            assert time.monotonic() < deadline and process.poll() is None
            time.sleep(0.05)
        capsys.readouterr()
        assert main(["resume", str(out), "--quiet"]) == 2
        error = capsys.readouterr().err
        assert "still going" in error and str(process.pid) in error
        assert main(["status", str(out)]) == 0
        assert "state      running" in capsys.readouterr().out
    finally:
        process.send_signal(signal.SIGINT)
        process.wait(timeout=60)
    assert process.returncode == 130
    # Once the process has ended, the folder is free again (the kernel dropped the lock).
    assert not RunFolder(out).is_running()
