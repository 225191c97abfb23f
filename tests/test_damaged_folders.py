"""A full disk, a read-only folder, planted links and every damaged file of a run folder: one
line, exit 1 or 2, status and history kept, and `resume` continues or says what to do."""

from __future__ import annotations

import errno
import json
import os
import shutil
import sys
from pathlib import Path

import pandas as pd
import pytest

from acquire.store import append_table
from acquire.store.run_folder import RESERVE_FILE
from tests.conftest import run_cli

ROOT = Path(__file__).resolve().parents[1]
# protocols/current_ladder.yaml: 16 points, 2 channels; readings rows per point (both channels):
# 3 cycles x 6 steps ("+0--0+") x 1 reading per step x 2 channels.
POINTS, CHANNELS, ROWS_PER_POINT = 16, 2, 3 * 6 * 1 * 2
KEY = ["point", "attempt", "channel", "cycle", "step", "repeat"]


@pytest.fixture
def inputs(tmp_path: Path) -> tuple[Path, Path]:
    """A private copy of the example protocols (so a test may change one) and the rig."""
    folder = tmp_path / "protocols"
    shutil.copytree(ROOT / "protocols", folder)
    return folder / "current_ladder.yaml", folder / "rigs" / "simulated.yaml"


def simulate(protocol: Path, rig: Path, out: Path, *extra: str) -> tuple[int, str, str]:
    result = run_cli(["run", str(protocol), "--rig", str(rig), "--simulate", "--seed", "2",
                      "--out", str(out), "--quiet", *extra])
    return result.code, result.out, result.err


@pytest.fixture
def finished(inputs: tuple[Path, Path], tmp_path: Path) -> Path:
    out = tmp_path / "run"
    assert simulate(*inputs, out)[0] == 0
    return out


def cut_to_points(out: Path, points: int) -> None:
    """Both tables as a run stopped after `points` points leaves them."""
    readings = (out / "readings.csv").read_text().splitlines(keepends=True)
    (out / "readings.csv").write_text("".join(readings[:1 + points * ROWS_PER_POINT]))
    table = (out / "points.csv").read_text().splitlines(keepends=True)
    (out / "points.csv").write_text("".join(table[:1 + points * CHANNELS]))


def assert_complete(out: Path) -> None:
    readings = pd.read_csv(out / "readings.csv")
    assert not readings.duplicated(KEY).any(), "a reading was written twice"
    points = pd.read_csv(out / "points.csv")
    assert not points.duplicated(["point", "channel"]).any(), "a point was written twice"
    assert sorted(points["point"].unique()) == list(range(POINTS))


class FailingFile:
    """An open table whose writes fail once `state` says so, as on a full disk."""

    def __init__(self, handle: object, state: dict[str, object]) -> None:
        self._handle = handle
        self._state = state

    def writelines(self, lines: object) -> None:
        state = self._state
        state["writes"] = int(state["writes"]) + 1  # type: ignore[call-overload]
        if not state["off"] and int(state["writes"]) > int(state["after"]):  # type: ignore[call-overload]
            state["failed"] = True
            raise OSError(state["errno"], state["text"])  # a failed write names no file
        self._handle.writelines(lines)  # type: ignore[attr-defined]

    def __getattr__(self, name: str) -> object:
        return getattr(self._handle, name)


def failing_disk(monkeypatch: pytest.MonkeyPatch, code: int, text: str, after_writes: int
                 ) -> dict[str, object]:
    """readings.csv's writes fail after `after_writes` (until state["off"] is set)."""
    state: dict[str, object] = {"writes": 0, "after": after_writes, "errno": code, "text": text,
                                "off": False, "failed": False}
    original = append_table.open_for_append

    def opened(path: Path) -> object:
        handle = original(path)
        return FailingFile(handle, state) if path.name == "readings.csv" else handle

    monkeypatch.setattr(append_table, "open_for_append", opened)
    return state


def one_line_error(result_err: str) -> str:
    lines = result_err.strip().splitlines()
    assert len(lines) == 1, result_err
    return lines[0]


# -- a full disk and a folder gone read-only, mid-run --------------------------------------------
@pytest.mark.parametrize(("code", "text"), [
    (errno.ENOSPC, "No space left on device"), (errno.EROFS, "Read-only file system")])
def test_a_write_failing_mid_run_ends_it_properly_and_resume_continues(
    inputs: tuple[Path, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch, code: int,
    text: str,
) -> None:
    protocol, rig = inputs
    marker = tmp_path / "notified.txt"
    script = f"import sys; open({str(marker)!r}, 'w').write(' '.join(sys.argv[1:]))"
    with open(protocol, "a", encoding="utf-8") as handle:
        handle.write(f"notify: [{sys.executable!r}, -c, {script!r}]\n")
    failing = failing_disk(monkeypatch, code, text, after_writes=100)  # of the 16 x 18 steps
    out = tmp_path / "run"
    status_code, _, err = simulate(protocol, rig, out, "--notify")
    assert status_code == 1
    line = one_line_error(err)
    assert line.startswith(f"failed: run {out}: failed: cannot write {out / 'readings.csv'}: "
                           f"{text}; safe state verified")
    assert line.endswith(f"'flipsweep resume {out}' continues it")
    status = json.loads((out / "status.json").read_text())
    assert status["state"] == "failed" and text in status["reason"]
    history = json.loads((out / "run.json").read_text())["history"]
    assert history[-1]["event"] == "failed" and text in history[-1]["reason"]
    assert marker.read_text() == f"failed {out}"
    assert not (out / RESERVE_FILE).exists()  # given back at the end for these writes
    failing["off"] = True
    resumed = run_cli(["resume", str(out), "--quiet"])
    assert resumed.code == 0, resumed.err
    assert_complete(out)


def test_when_nothing_can_be_written_the_run_still_ends_in_one_line_and_notifies(
    inputs: tuple[Path, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
) -> None:
    from acquire.store import run_folder

    protocol, rig = inputs
    marker = tmp_path / "notified.txt"
    script = f"import sys; open({str(marker)!r}, 'w').write(' '.join(sys.argv[1:]))"
    with open(protocol, "a", encoding="utf-8") as handle:
        handle.write(f"notify: [{sys.executable!r}, -c, {script!r}]\n")
    full = failing_disk(monkeypatch, errno.ENOSPC, "No space left on device", after_writes=100)

    def no_rewrite(path: Path, text: str, durable: bool = True) -> None:
        if full["failed"]:
            raise OSError(errno.ENOSPC, "No space left on device", str(path))
        append_table.atomic_write_text(path, text, durable)

    monkeypatch.setattr(run_folder, "atomic_write_text", no_rewrite)
    out = tmp_path / "run"
    code, _, err = simulate(protocol, rig, out, "--notify")
    assert code == 1
    line = one_line_error(err)
    assert "cannot write" in line and "readings.csv" in line and "status.json" in line
    assert "run.json" in line and "safe state verified" in line
    assert marker.read_text() == f"failed {out}"


def test_a_read_only_run_folder_is_refused_by_resume(
    finished: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import tempfile

    def refused(*args: object, **kwargs: object) -> tuple[int, str]:
        raise PermissionError(errno.EACCES, "Permission denied")

    cut_to_points(finished, 5)
    monkeypatch.setattr(tempfile, "mkstemp", refused)
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 2
    assert one_line_error(result.err) == (
        f"error: {finished}: the run folder cannot be written (Permission denied) -- fix: make "
        "the folder writable (or copy it to a disk that is)")


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_a_really_read_only_folder_is_refused(finished: Path) -> None:
    cut_to_points(finished, 5)
    finished.chmod(0o555)
    try:
        result = run_cli(["resume", str(finished), "--quiet"])
    finally:
        finished.chmod(0o755)
    assert result.code == 2 and "cannot be written" in result.err


# -- damaged or missing files --------------------------------------------------------------------
REBUILD = "--rebuild-record --protocol PROTOCOL --rig RIG"


def damage_run_json(out: Path, how: str) -> None:
    path = out / "run.json"
    if how == "missing":
        path.unlink()
    elif how == "truncated":
        path.write_text(path.read_text()[:300])
    elif how == "nul":
        data = path.read_bytes()
        path.write_bytes(data[:200] + b"\0" * 512 + data[712:])
    elif how == "foreign":
        path.write_text('{"something": "else"}\n')


@pytest.mark.parametrize(("how", "expected"), [
    ("missing", "has no run.json, so it is not a flipsweep run folder"),
    ("truncated", "run.json is damaged (Unterminated string"),
    ("nul", "run.json is damaged (it holds NUL bytes, as a power cut can leave)"),
    ("foreign", "run.json is not a run record: version None is not one this flipsweep reads"),
])
@pytest.mark.parametrize("command", ["resume", "status", "reduce", "fit", "report"])
def test_a_damaged_run_json_is_one_line_naming_the_rebuild(
    finished: Path, how: str, expected: str, command: str
) -> None:
    damage_run_json(finished, how)
    result = run_cli([command, str(finished)])
    assert result.code == 2
    line = one_line_error(result.err)
    assert expected in line
    assert f"'flipsweep resume {finished} {REBUILD}'" in line


@pytest.mark.parametrize("command", ["resume", "status", "reduce", "fit", "report"])
@pytest.mark.parametrize(("what", "expected"), [
    ("nothing", "no such folder"), ("file", "is a file, not a run folder"),
    ("empty", "has no run.json, so it is not a flipsweep run folder")])
def test_every_command_on_a_folder_that_is_not_a_run_is_one_line(
    tmp_path: Path, command: str, what: str, expected: str
) -> None:
    target = tmp_path / "target"
    if what == "file":
        target.write_text("a file")
    elif what == "empty":
        target.mkdir()
    result = run_cli([command, str(target)])
    assert result.code == 2
    assert expected in one_line_error(result.err)


def test_fit_and_report_on_a_run_with_no_points_are_one_line(
    finished: Path,
) -> None:
    (finished / "points.csv").write_text((finished / "points.csv").read_text().splitlines()[0]
                                         + "\n")
    for command in ("fit", "report"):
        result = run_cli([command, str(finished)])
        assert result.code == 2
        assert "has no reduced points yet" in one_line_error(result.err)


@pytest.mark.parametrize("how", ["deleted", "header only", "cut mid-file"])
def test_lost_readings_never_restart_at_point_zero_over_the_old_points(
    finished: Path, how: str
) -> None:
    cut_to_points(finished, 9)
    readings = finished / "readings.csv"
    if how == "deleted":
        readings.unlink()
    elif how == "header only":
        readings.write_text(readings.read_text().splitlines(keepends=True)[0])
    else:
        lines = readings.read_text().splitlines(keepends=True)
        readings.write_text("".join(lines[:1 + 4 * ROWS_PER_POINT]))
    before = (finished / "points.csv").read_text()
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 2
    line = one_line_error(result.err)
    assert "points.csv holds" in line and "whose readings readings.csv no longer has" in line
    assert f"'flipsweep resume {finished} --keep-points-aside'" in line
    assert (finished / "points.csv").read_text() == before  # nothing touched
    result = run_cli(["resume", str(finished), "--quiet", "--keep-points-aside"])
    assert result.code == 0, result.err
    assert "kept in points.unbacked.csv" in result.out
    assert_complete(finished)
    aside = pd.read_csv(finished / "points.unbacked.csv", header=None)
    assert len(aside) == (9 if how != "cut mid-file" else 5) * CHANNELS


def test_nul_bytes_at_the_end_of_the_tables_are_cut_and_resume_continues(finished: Path) -> None:
    cut_to_points(finished, 6)
    for name in ("readings.csv", "points.csv"):
        with open(finished / name, "ab") as handle:
            handle.write(b"\0" * 4096)  # a power cut: the size grew, the data never came
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 0, result.err
    assert "resuming from point 6 of 16" in result.out
    assert "NUL bytes from line" in result.out
    assert_complete(finished)


def test_damage_with_good_rows_after_it_needs_consent(finished: Path) -> None:
    cut_to_points(finished, 8)
    readings = finished / "readings.csv"
    lines = readings.read_text().splitlines(keepends=True)
    damaged_line = 1 + 3 * ROWS_PER_POINT + 5  # inside point 3
    lines[damaged_line] = "\0" * 40 + "\n"
    readings.write_text("".join(lines))
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 2
    assert (f"readings.csv is damaged at line {damaged_line + 1} and has good rows after it"
            in one_line_error(result.err))
    result = run_cli(["resume", str(finished), "--quiet", "--keep-points-aside"])
    assert result.code == 0, result.err
    assert "resuming from point 3 of 16" in result.out
    kept = (finished / "readings.damaged.csv").read_text().splitlines()
    assert len(kept) == len(lines) - damaged_line  # the damaged line and everything after it
    assert_complete(finished)


def test_a_deleted_points_table_is_rebuilt(finished: Path) -> None:
    cut_to_points(finished, 7)
    (finished / "points.csv").unlink()
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 0, result.err
    assert "resuming from point 7 of 16" in result.out
    assert_complete(finished)


# -- run.json rebuilt from the protocol and rig --------------------------------------------------
def test_a_lost_run_json_is_rebuilt_from_the_protocol_and_rig(
    finished: Path, inputs: tuple[Path, Path]
) -> None:
    protocol, rig = inputs
    cut_to_points(finished, 5)
    damage_run_json(finished, "nul")
    result = run_cli(["resume", str(finished), "--quiet", "--rebuild-record", "--protocol",
                      str(protocol), "--rig", str(rig), "--simulate", "--seed", "2"])
    assert result.code == 0, result.err
    assert "SHA-256 of the protocol and the rig match the ones the run recorded" in result.out
    assert "the protocol's schedule matches the 5 point(s) in readings.csv" in result.out
    assert (finished / "run.damaged.json").exists()
    history = json.loads((finished / "run.json").read_text())["history"]
    assert [entry["event"] for entry in history] == ["rebuilt", "resume", "done"]
    assert_complete(finished)


def test_a_rebuild_with_other_files_is_refused(
    finished: Path, inputs: tuple[Path, Path]
) -> None:
    protocol, rig = inputs
    cut_to_points(finished, 5)
    damage_run_json(finished, "missing")
    # Another protocol: the hashes in status.json say so.
    other = protocol.with_name("other.yaml")
    other.write_text(protocol.read_text().replace("stop: 4 mA", "stop: 3.5 mA"))
    result = run_cli(["resume", str(finished), "--rebuild-record", "--protocol", str(other),
                      "--rig", str(rig), "--simulate"])
    assert result.code == 2
    assert "is not the one this run was started with" in one_line_error(result.err)
    # With no hash left, the readings still tell: point 4 was measured at 2.5 mA.
    (finished / "status.json").unlink()
    shifted = protocol.with_name("shifted.yaml")
    shifted.write_text(protocol.read_text().replace("start: 0.5 mA", "start: 1 mA"))
    result = run_cli(["resume", str(finished), "--rebuild-record", "--protocol", str(shifted),
                      "--rig", str(rig), "--simulate"])
    assert result.code == 2
    assert "readings.csv: point 0 was measured with current_A = 0.0005" in one_line_error(
        result.err)
    assert not (finished / "run.json").exists()  # nothing written
    # And a readable run.json is never rebuilt.
    result = run_cli(["resume", str(finished), "--rebuild-record", "--protocol", str(protocol),
                      "--rig", str(rig), "--simulate"])
    assert result.code == 0
    result = run_cli(["resume", str(finished), "--rebuild-record", "--protocol", str(protocol),
                      "--rig", str(rig), "--simulate"])
    assert result.code == 2
    assert "run.json is readable: there is nothing to rebuild" in one_line_error(result.err)


def test_resume_options_of_a_rebuild_need_it(finished: Path, inputs: tuple[Path, Path]) -> None:
    result = run_cli(["resume", str(finished), "--protocol", str(inputs[0])])
    assert result.code == 2
    assert "--protocol applies only with --rebuild-record" in one_line_error(result.err)


# -- planted links -------------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["status.json", "readings.csv", "run.lock", "run.log"])
def test_a_link_planted_in_a_run_folder_is_never_written_through(
    finished: Path, tmp_path: Path, name: str
) -> None:
    cut_to_points(finished, 5)
    victim = tmp_path / "victim.txt"
    victim.write_text("precious")
    target = finished / name
    if target.exists():
        target.unlink()
    target.symlink_to(victim)
    result = run_cli(["resume", str(finished), "--quiet"])
    assert victim.read_text() == "precious"
    assert result.code == 2
    line = one_line_error(result.err)
    assert f"{name} is a symbolic link" in line or "lock file cannot be opened" in line


def test_a_temporary_file_name_taken_by_a_link_is_never_followed(
    finished: Path, tmp_path: Path
) -> None:
    from acquire.store.safe_files import atomic_write_text

    victim = tmp_path / "victim.txt"
    victim.write_text("precious")
    # The old fixed name of the temporary file, and a guess at the new ones.
    (finished / "status.json.tmp").symlink_to(victim)
    for suffix in range(5):
        (finished / f".status.json.{suffix}.tmp").symlink_to(victim)
    atomic_write_text(finished / "status.json", "{}\n")
    assert victim.read_text() == "precious"
    assert (finished / "status.json").read_text() == "{}\n"
    assert not (finished / "status.json").is_symlink()


def test_a_run_killed_after_its_last_point_is_made_safe_by_resume(finished: Path) -> None:
    record_path = finished / "run.json"
    record = json.loads(record_path.read_text())
    record["history"] = record["history"][:-1]  # the kill came before the run could close
    record_path.write_text(json.dumps(record))
    result = run_cli(["resume", str(finished), "--quiet"])
    assert result.code == 0, result.err
    assert "resuming from point 16 of 16" in result.out
    assert "done; safe state verified (source: current 0 mA, output off)" in result.out
    assert_complete(finished)
    # A run that closed properly is left alone.
    again = run_cli(["resume", str(finished), "--quiet"])
    assert again.code == 0 and again.out == f"run {finished}: all 16 points already done\n"
