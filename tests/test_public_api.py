"""The notebook API (acquire/__init__.py), used as a notebook would: nothing else imported."""

from __future__ import annotations

from pathlib import Path

import pytest

import acquire
from tests.conftest import PROTOCOLS, SIMULATED_RIG


def test_a_rehearsal_through_the_public_api_only(tmp_path: Path) -> None:
    protocol = acquire.load_protocol(PROTOCOLS / "current_ladder.yaml")
    rig = acquire.load_rig(SIMULATED_RIG)
    planned = acquire.estimate(protocol, rig)
    # current_ladder: 1 field x 2 angles x 8 currents (0.5 to 4 mA in 0.5 mA steps)
    assert planned.points == 16
    out = tmp_path / "run"
    assert acquire.run(protocol, rig, out, simulate=True, seed=3) == 0
    points = acquire.reduce(out)
    # two channels (vxx, vxy) per point
    assert len(points) == 2 * planned.points
    assert sorted(points["channel"].unique()) == ["vxx", "vxy"]
    fits = acquire.fit(out)
    assert "current" in set(fits["analysis"])
    assert acquire.resume(out) == 0  # every point done: nothing to do


def test_bad_input_is_an_input_error(tmp_path: Path) -> None:
    broken = tmp_path / "broken.yaml"
    broken.write_text("name: x\n", encoding="utf-8")
    from acquire.errors import InputError

    with pytest.raises(InputError):
        acquire.load_protocol(broken)


def test_the_version_is_the_distributions() -> None:
    from importlib.metadata import version

    assert acquire.__version__ == version("flipsweep")
