"""run.json's operator is documented and optional; `resume` on real instruments shows the
cautions before it hands over to the run."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from acquire.runtime.cautions import CAUTION
from acquire.runtime.execute import RunEnd
from acquire.store.run_folder import host_description
from tests.conftest import SIMULATED_RIG, CliResult, run_cli

CURRENT_ONLY = "{axis: current, values: [1 mA, 2 mA]}"


def test_the_operator_is_the_login_a_name_or_no_one(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("USER", "night-shift")
    assert host_description()["user"] == "night-shift"
    assert host_description("A. Operator")["user"] == "A. Operator"
    assert "user" not in host_description("")
    assert set(host_description("")) == {"host", "platform"}


def simulated_run(make_protocol: Callable[..., Path], folder: Path, *extra: str) -> CliResult:
    protocol = make_protocol(CURRENT_ONLY, alternation="{pattern: '+0-', cycles: 2}")
    return run_cli(["run", str(protocol), "--rig", str(SIMULATED_RIG), "--simulate",
                    "--out", str(folder), "--quiet", *extra])


def test_run_records_no_operator_when_asked(make_protocol: Callable[..., Path],
                                            tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("USER", "night-shift")
    assert simulated_run(make_protocol, tmp_path / "named").code == 0
    assert json.loads((tmp_path / "named" / "run.json").read_text())["host"]["user"] == (
        "night-shift")
    assert simulated_run(make_protocol, tmp_path / "anonymous", "--operator", "").code == 0
    host = json.loads((tmp_path / "anonymous" / "run.json").read_text())["host"]
    assert "user" not in host


@pytest.mark.parametrize("simulate", [False, True])
def test_resume_shows_the_cautions_before_real_instruments(
    simulate: bool, make_protocol: Callable[..., Path], tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    folder = tmp_path / "run"
    assert simulated_run(make_protocol, folder).code == 0
    # The same folder as a real run cut short before its first point was stored.
    record = json.loads((folder / "run.json").read_text())
    record["options"]["simulate"] = simulate
    (folder / "run.json").write_text(json.dumps(record), encoding="utf-8")
    for table in ("readings.csv", "points.csv"):
        path = folder / table
        path.write_text(path.read_text().splitlines()[0] + "\n", encoding="utf-8")
    handed_over: list[Any] = []

    def stand_in(*args: Any) -> RunEnd:  # the run itself, which would open the instruments
        handed_over.append(args)
        return RunEnd("done")

    monkeypatch.setattr("acquire.runtime.resume.execute", stand_in)
    result = run_cli(["resume", str(folder), "--quiet"])
    assert result.code == 0, result.err
    assert len(handed_over) == 1
    assert (CAUTION in result.err) is not simulate
