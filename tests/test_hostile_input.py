"""Hostile or mistaken input is bounded: file kind and size, nesting, list length, aliases,
loop lengths and the point cap all end in one InputError naming the file and the key."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pytest

from acquire.errors import InputError
from acquire.inputs import loops
from acquire.inputs.load import load_protocol
from acquire.inputs.yaml_bounds import MAX_DEPTH, MAX_FILE_BYTES, MAX_ITEMS
from acquire.inputs.yaml_source import load_document
from tests.conftest import DEMO_SAMPLE

Write = Callable[[str, str], Path]
MakeProtocol = Callable[..., Path]


def refused(path: Path) -> InputError:
    with pytest.raises(InputError) as raised:
        load_document(path)
    return raised.value


def test_a_file_over_the_size_cap_is_refused_unread(tmp_path: Path) -> None:
    path = tmp_path / "huge.yaml"
    with open(path, "wb") as handle:  # sparse: the size is what counts, nothing is read
        handle.truncate(MAX_FILE_BYTES + 1)
    error = refused(path)
    assert "larger than" in error.problem and error.file == str(path)


def test_a_fifo_is_refused_without_blocking(tmp_path: Path, write: Write) -> None:
    fifo = tmp_path / "pipe.yaml"
    os.mkfifo(fifo)  # opening it for reading would wait for a writer forever
    child = write("child.yaml", "extends: pipe.yaml\nname: x\n")
    error = refused(child)
    assert "not a regular file" in error.problem and error.key == ("extends",)
    assert "not a regular file" in refused(fifo).problem


def test_a_folder_is_not_a_protocol(tmp_path: Path) -> None:
    assert "not a regular file" in refused(tmp_path).problem


def test_a_list_longer_than_the_cap_is_refused_at_its_key(write: Write) -> None:
    items = ", ".join(["1 mA"] * (MAX_ITEMS + 1))
    path = write("long.yaml", f"name: x\nloops:\n  - {{axis: current, values: [{items}]}}\n")
    error = refused(path)
    assert f"more than {MAX_ITEMS}" in error.problem
    assert error.key == ("loops", 0, "values")


def test_nesting_at_the_cap_loads_and_one_more_level_is_refused(write: Write) -> None:
    ok = write("ok.yaml", "a: " + "[" * (MAX_DEPTH - 1) + "]" * (MAX_DEPTH - 1) + "\n")
    assert load_document(ok).data["a"] is not None
    deep = write("deep.yaml", "a: " + "[" * MAX_DEPTH + "]" * MAX_DEPTH + "\n")
    assert "levels deep" in refused(deep).problem


def test_an_alias_used_twice_loads_and_errors_inside_point_at_its_key(
    write: Write,
) -> None:
    text = (
        "name: aliases\n"
        f"sample: &bar {DEMO_SAMPLE}\n"
        "description: x\n"
        "readings: {channels: [vxx]}\n"
        "limits: {current: 5 mA}\n"
        "loops:\n"
        "  - &ladder {axis: current, values: [1 mA, 2 mA]}\n"
    )
    loaded = load_protocol(write("ok.yaml", text))
    assert loaded.values_of("current") == (1e-3, 2e-3)
    located = load_document(write("again.yaml", "a: &x {b: 1}\nc: *x\n")).source
    # the alias's own key is located; its content is not walked again under it
    assert ("c",) in located.locations and ("c", "b") not in located.locations
    assert located.where(("c", "b"))[1] == 2


def test_an_explicit_list_counts_toward_the_loop_cap() -> None:
    with pytest.raises(loops.LoopSpecError) as raised:
        loops.expand(values=[1e-3] * (loops.MAX_VALUES_PER_LOOP + 1), start=None, stop=None,
                     step=None, num=None, spacing="linear", there_and_back=False)
    assert raised.value.key == "values"


def test_the_point_cap_can_be_raised_by_the_protocol(make_protocol: MakeProtocol) -> None:
    big = ("{axis: field, start: -1 T, stop: 1 T, num: 1001}",
           "{axis: current, start: 0.1 mA, stop: 1 mA, num: 1000}")  # 1,001,000 points
    with pytest.raises(InputError) as raised:
        load_protocol(make_protocol(*big))
    assert raised.value.key == ("loops",) and "max_points: 1001000" in raised.value.fix
    assert load_protocol(make_protocol(*big, max_points="1001000")).protocol.max_points == 1001000


def test_a_yes_is_not_a_count(make_protocol: MakeProtocol) -> None:
    for section in ("{pattern: '+0-', cycles: yes}", "{pattern: '+0-', cycles: true}"):
        with pytest.raises(InputError) as raised:
            load_protocol(make_protocol("{axis: current, values: [1 mA]}", alternation=section))
        assert raised.value.key == ("alternation", "cycles")
    with pytest.raises(InputError) as raised:
        load_protocol(make_protocol("{axis: current, values: [1 mA]}",
                                    on_problem="{retries: no}"))
    assert raised.value.key == ("on_problem", "retries")


# --- extends: the folder tree, and nothing of a foreign file in a message ----------------------


def test_extends_outside_the_folder_needs_the_allowance(write: Write) -> None:
    write("shared/base.yaml", "name: base\n")
    child = write("mine/child.yaml", "extends: ../shared/base.yaml\n")
    error = refused(child)
    assert error.key == ("extends",) and "extends_anywhere" in error.fix
    allowed = write("mine/allowed.yaml", "extends: ../shared/base.yaml\nextends_anywhere: true\n")
    assert load_document(allowed).data == {"name": "base"}


def test_a_symbolic_link_out_of_the_folder_is_outside(tmp_path: Path, write: Write) -> None:
    write("elsewhere/base.yaml", "name: base\n")
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "base.yaml").symlink_to(tmp_path / "elsewhere" / "base.yaml")
    child = write("mine/child.yaml", "extends: base.yaml\n")
    assert "outside the folder" in refused(child).problem


def test_only_the_file_given_may_allow_extends_anywhere(write: Write) -> None:
    write("shared/base.yaml", "name: base\n")
    write("mine/middle.yaml", "extends: ../shared/base.yaml\nextends_anywhere: true\n")
    child = write("mine/child.yaml", "extends: middle.yaml\n")
    error = refused(child)
    assert error.key == ("extends_anywhere",) and error.file is not None
    assert error.file.endswith("middle.yaml")


def test_an_error_never_shows_another_files_content(write: Write) -> None:
    write("notes.yaml", "the-secret-password-1234\n")
    child = write("child.yaml", "extends: notes.yaml\nname: x\n")
    error = refused(child)
    assert "secret" not in error.one_line()
    assert "a single value" in error.problem
