"""What the runner does when an instrument reports a problem: the protocol's on_problem policy."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml

from acquire.cli import main

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"

LADDER = """extends: {base}
extends_anywhere: true
name: policy check
alternation: {{pattern: "+-", cycles: 2, settle: 5 ms}}
readings: {{per_step: 1, channels: [vxx]}}
on_problem: {{compliance: {action}, instrument_error: retry, wait_timeout: skip, retries: 1}}
loops:
  - {{axis: current, values: [0.5 mA, 1 mA, 2 mA]}}
"""


def rig_with(tmp_path: Path, simulation: dict[str, object], compliance: str | None = None) -> Path:
    rig = yaml.safe_load(RIG.read_text())
    rig["simulation"] = {**rig.get("simulation", {}), **simulation}
    if compliance:
        rig["instruments"]["source"]["compliance"] = compliance
    path = tmp_path / "rig.yaml"
    path.write_text(yaml.safe_dump(rig))
    return path


def run(tmp_path: Path, protocol_text: str, rig: Path, name: str = "run",
        *extra: str) -> tuple[int, Path]:
    protocol = tmp_path / f"{name}.yaml"
    protocol.write_text(protocol_text)
    out = tmp_path / f"out_{name}"
    code = main(
        ["run", str(protocol), "--rig", str(rig), "--simulate", "--out", str(out), "--quiet",
         *extra]
    )
    return code, out


def compliance_rig(tmp_path: Path) -> Path:
    # The protocol's geometry says 300 ohm (0.6 V at 2 mA, well within 1.5 V), so the check
    # passes; the simulated device is really 2 kOhm: 0.5 mA needs 1.0 V (fine), 1 mA needs 2 V
    # and 2 mA 4 V, both above the 1.5 V compliance.
    return rig_with(tmp_path, {"resistance_ohm": 2000.0}, compliance="1.5 V")


@pytest.mark.parametrize("action", ["retry", "flag", "skip"])
def test_compliance_flags_retries_or_skips(tmp_path: Path, action: str) -> None:
    rig = compliance_rig(tmp_path)
    code, out = run(
        tmp_path, LADDER.format(base=ROOT / "protocols" / "base.yaml", action=action), rig, action
    )
    assert code == 0
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    tripping = {1, 2}
    if action == "skip":
        assert set(points["point"]) == {0}
    else:
        flagged = points[points["flags"].str.contains("compliance")]
        assert set(flagged["point"]) == tripping
        clean = points[~points["flags"].str.contains("compliance")]
        assert set(clean["point"]) == {0}
    if action == "retry":
        readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
        # retries: 1 -> each tripping point is measured twice (attempts 0 and 1), then kept.
        assert set(readings[readings["point"] == 2]["attempt"]) == {0, 1}
    log = (out / "run.log").read_text()
    assert "compliance" in log


def test_compliance_stop_ends_the_run_safely(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    rig = compliance_rig(tmp_path)
    code, out = run(
        tmp_path, LADDER.format(base=ROOT / "protocols" / "base.yaml", action="stop"), rig, "stop"
    )
    assert code == 1
    error = capsys.readouterr().err
    assert "compliance" in error and error.count("\n") == 1
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "failed"
    assert "safe" in error


TEMPERATURE = """extends: {base}
extends_anywhere: true
name: wait policy
alternation: {{pattern: "+-", cycles: 1, settle: 5 ms}}
readings: {{per_step: 1, channels: [vxx]}}
waits:
  temperature: {{tolerance: 10 mK, hold: 1 s, timeout: 20 s}}
on_problem: {{wait_timeout: {action}}}
loops:
  - {{axis: temperature, values: [300 K, 250 K]}}
  - {{axis: current, values: [1 mA]}}
"""


@pytest.mark.parametrize(
    "action, points_kept, code",
    [
        ("skip", {0}, 0),
        ("flag", {0, 1}, 0),
        ("stop", {0}, 1),
    ],
)
def test_temperature_that_never_settles(
    tmp_path: Path, action: str, points_kept: set[int], code: int
) -> None:
    # 300 K -> 250 K at the rig's 5 K/min takes ten minutes: a 20 s timeout cannot be met.
    rig = rig_with(tmp_path, {})
    got, out = run(
        tmp_path,
        TEMPERATURE.format(base=ROOT / "protocols" / "base.yaml", action=action),
        rig,
        action,
    )
    assert got == code
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    assert set(points["point"]) == points_kept
    if action == "flag":
        assert "wait_timeout" in points[points["point"] == 1]["flags"].iloc[0]
    assert "did not settle" in (out / "run.log").read_text()


def test_notification_program_gets_state_and_folder(tmp_path: Path) -> None:
    marker = tmp_path / "notified.txt"
    script = f"import sys; open({str(marker)!r}, 'w').write(' '.join(sys.argv[1:]))"
    protocol = LADDER.format(base=ROOT / "protocols" / "base.yaml", action="retry")
    protocol += f"notify: [{sys.executable!r}, -c, {script!r}]\n"
    # A rehearsal runs the notify program only when asked to.
    code, out = run(tmp_path, protocol, rig_with(tmp_path, {}), "rehearsal")
    assert code == 0 and not marker.exists()
    assert "not run in a rehearsal" in (out / "run.log").read_text()
    code, out = run(tmp_path, protocol, rig_with(tmp_path, {}), "notify", "--notify")
    assert code == 0
    assert marker.read_text() == f"done {out}"
