"""Shared fixtures: paths of the example files, an in-process CLI runner, a VISA tripwire."""

from __future__ import annotations

import contextlib
import io
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
PROTOCOLS = REPO / "protocols"
SIMULATED_RIG = PROTOCOLS / "rigs" / "simulated.yaml"


@dataclass(frozen=True)
class CliResult:
    code: int
    out: str
    err: str


def run_cli(argv: Sequence[str]) -> CliResult:
    """`flipsweep ARGV` in this process, with stdout and stderr captured."""
    from acquire.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(argv))
    return CliResult(code, out.getvalue(), err.getvalue())


@pytest.fixture
def cli() -> Callable[[Sequence[str]], CliResult]:
    return run_cli


@pytest.fixture
def no_visa(monkeypatch: pytest.MonkeyPatch) -> list[tuple[object, ...]]:
    """Make any VISA session fail loudly; the list records every attempt to open one."""
    import pyvisa
    import pyvisa.highlevel

    attempts: list[tuple[object, ...]] = []

    class Tripwire:
        def __init__(self, *args: object, **kwargs: object) -> None:
            attempts.append(args)
            raise AssertionError("a check-only command opened a VISA resource manager")

    monkeypatch.setattr(pyvisa, "ResourceManager", Tripwire)
    monkeypatch.setattr(pyvisa.highlevel, "ResourceManager", Tripwire)
    return attempts


# The demo bar used across the tests (an invented sample): NiFe 4 nm / Pt 5 nm, 40 um x 5 um.
DEMO_SAMPLE = """{id: demo-7, channel: {length: 40 um, width: 5 um}, layers: [
    {name: NiFe, thickness: 4 nm, resistivity: 40 uohm*cm},
    {name: Pt, thickness: 5 nm, resistivity: 30 uohm*cm, carrier: true}]}"""


@pytest.fixture
def make_protocol(tmp_path: Path) -> Callable[..., Path]:
    """Write a small valid protocol: loops are flow mappings, other keys replace sections.

    make_protocol("{axis: current, values: [1 mA]}", alternation="{pattern: '+-'}")
    """

    def _make(*loops: str, file: str = "protocol.yaml", **sections: str) -> Path:
        body = {
            "name": "test protocol",
            "sample": DEMO_SAMPLE,
            "readings": "{channels: [vxx]}",
            "limits": "{current: 5 mA}",
            **sections,
        }
        text = "".join(f"{key}: {value}\n" for key, value in body.items())
        text += "loops:\n" + "".join(f"  - {loop}\n" for loop in loops)
        path = tmp_path / file
        path.write_text(text, encoding="utf-8")
        return path

    return _make


@pytest.fixture
def write(tmp_path: Path) -> Callable[[str, str], Path]:
    """Write a text file under tmp_path (subfolders allowed) and return its path."""

    def _write(name: str, text: str) -> Path:
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
        return path

    return _write
