"""End-to-end dry runs: the real runner, drivers and pyvisa-sim instruments on a virtual clock."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from acquire.cli import main
from acquire.inputs.load import load_protocol
from sim_instruments.sample_model import BilayerSample, SampleParameters

ROOT = Path(__file__).resolve().parent.parent
RIG = ROOT / "protocols" / "rigs" / "simulated.yaml"
EXAMPLES = sorted((ROOT / "protocols").glob("*.yaml"))
FIXTURES = Path(__file__).resolve().parent / "protocols"


def run(protocol: Path, out: Path, seed: int = 3) -> int:
    return main(
        [
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
        ]
    )


def truth_model(protocol: Path, run_dir: Path) -> BilayerSample:
    """The simulated sample rebuilt from the parameters run.json records as the truth."""
    truth = json.loads((run_dir / "run.json").read_text())["simulation"]["sample"]
    known = SampleParameters.field_names()
    parameters = SampleParameters(**{k: v for k, v in truth.items() if k in known})
    return BilayerSample(parameters, "xy", seed=0)


@pytest.mark.parametrize("protocol", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_every_example_protocol_runs(protocol: Path, tmp_path: Path) -> None:
    out = tmp_path / "run"
    assert run(protocol, out) == 0
    for name in (
        "readings.csv",
        "readings.csv-metadata.json",
        "points.csv",
        "points.csv-metadata.json",
        "run.json",
        "run.log",
        "status.json",
    ):
        assert (out / name).is_file(), name
    loaded = load_protocol(protocol)
    points = pd.read_csv(out / "points.csv")
    channels = loaded.protocol.readings.channels
    n_points = int(np.prod([len(v) for v in loaded.loop_values]))
    assert len(points) == n_points * len(channels)
    assert sorted(points["point"].unique()) == list(range(n_points))
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "done" and status["points_done"] == n_points


def test_run_folder_records_inputs_and_identities(tmp_path: Path) -> None:
    protocol = ROOT / "protocols" / "current_ladder.yaml"
    out = tmp_path / "run"
    assert run(protocol, out) == 0
    document = json.loads((out / "run.json").read_text())
    files = {Path(entry["path"]).name: entry for entry in document["protocol"]["files"]}
    for name in ("current_ladder.yaml", "base.yaml"):
        text = (ROOT / "protocols" / name).read_text()
        # SHA-256 from hashlib (FIPS 180-4) on the file as it is on disk.
        assert files[name]["sha256"] == hashlib.sha256(text.encode()).hexdigest()
    # the file given verbatim; a base file by its hash only (it may hold anything)
    assert files["current_ladder.yaml"]["text"] == (ROOT / "protocols" / "current_ladder.yaml"
                                                    ).read_text()
    assert files["base.yaml"].get("text") is None
    assert set(document["instruments"]) == {"source", "vxx", "vxy", "magnet", "stage", "cryo"}
    assert all(identity for identity in document["instruments"].values())
    assert "sample" in document["simulation"]
    assert [entry["event"] for entry in document["history"]] == ["start", "done"]
    readings = pd.read_csv(out / "readings.csv", keep_default_na=False)
    # The protocol has no temperature loop: its setpoint column stays empty, readback does not.
    assert (readings["temperature_K"] == "").all()
    assert (readings["temperature_read_K"] != "").all()
    assert set(readings["polarity"]) == {1, 0, -1}
    zero_rows = readings[readings["polarity"] == 0]
    assert (zero_rows["current_A"].astype(float) == 0.0).all()


def test_unidirectional_ratio_agrees_with_simulated_truth(tmp_path: Path) -> None:
    protocol = FIXTURES / "truth_ladder.yaml"
    out = tmp_path / "run"
    assert run(protocol, out, seed=11) == 0
    model = truth_model(protocol, out)
    points = pd.read_csv(out / "points.csv")
    assert len(points) == 6
    for row in points.itertuples():
        model.apply_field(row.field_T, row.angle_deg)
        truth = model.expected("longitudinal", row.current_A, 300.0)
        pull = (
            row.unidirectional_ratio - truth.unidirectional_ratio
        ) / row.unidirectional_ratio_err
        assert abs(pull) < 3, (row.point, pull)
        assert row.unidirectional_ratio == pytest.approx(truth.unidirectional_ratio, rel=0.05)
        # The even part as well: the sample's resistance with its Joule heating.
        assert row.resistance_ohm == pytest.approx(truth.resistance_ohm, rel=1e-4)


def test_reduce_reproduces_the_live_reduction(tmp_path: Path) -> None:
    out = tmp_path / "run"
    assert run(ROOT / "protocols" / "mr_loop.yaml", out) == 0
    live = pd.read_csv(out / "points.csv", keep_default_na=False)
    assert main(["reduce", str(out)]) == 0
    again = pd.read_csv(out / "points.csv", keep_default_na=False)
    pd.testing.assert_frame_equal(live, again, check_exact=True)


def test_output_folder_must_be_new(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "run"
    out.mkdir()
    (out / "something").write_text("x")
    assert run(ROOT / "protocols" / "base.yaml", out) == 2
    assert "not empty" in capsys.readouterr().err


@pytest.mark.slow
def test_standard_errors_are_honest_across_seeds(tmp_path: Path) -> None:
    """Pulls (estimate - truth) / error over 50 seeds: SD between 0.8 and 1.2."""
    protocol = FIXTURES / "pulls.yaml"
    pulls = []
    model = None
    for seed in range(50):
        out = tmp_path / f"run{seed}"
        assert run(protocol, out, seed=seed) == 0
        model = model or truth_model(protocol, out)
        for row in pd.read_csv(out / "points.csv").itertuples():
            model.apply_field(row.field_T, row.angle_deg)
            truth = model.expected("longitudinal", row.current_A, 300.0)
            pulls.append(
                (row.unidirectional_ohm - truth.unidirectional_ohm) / row.unidirectional_ohm_err
            )
    spread = float(np.std(pulls, ddof=1))
    # 20 cycles: Student's t with 19 degrees of freedom has SD sqrt(19/17) = 1.06; with 200
    # pulls the sample SD scatters by about 1.06/sqrt(400) = 0.05, so [0.8, 1.2] is > 3 sigma.
    assert 0.8 < spread < 1.2, spread
    assert abs(float(np.mean(pulls))) < 0.3  # no bias: 3 sigma of the mean is 0.22
