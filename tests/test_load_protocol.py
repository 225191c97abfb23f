"""Loading protocol files: did-you-mean, `extends`, key paths with line numbers, `check --show`."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest
import yaml

from acquire.errors import InputError, format_key_path
from acquire.inputs.load import load_protocol
from tests.conftest import DEMO_SAMPLE, PROTOCOLS, SIMULATED_RIG, CliResult

Write = Callable[[str, str], Path]

BASE = f"""# a base protocol
name: base
sample: {DEMO_SAMPLE}
alternation: {{pattern: "+0-", cycles: 4, settle: 20 ms}}
readings: {{per_step: 2, channels: [vxx]}}
limits: {{current: 5 mA}}
loops:
  - {{axis: field, values: [0.2 T, 1 T]}}
  - {{axis: angle, start: 0 deg, stop: 90 deg, step: 45 deg}}
  - {{axis: current, values: [1 mA, 2 mA]}}
"""


def line_of(path: Path, fragment: str, occurrence: int = 1) -> int:
    """1-based number of the line holding `fragment` (its n-th occurrence), read by the test."""
    rows = [n for n, row in enumerate(path.read_text().splitlines(), 1) if fragment in row]
    return rows[occurrence - 1]


def error_of(path: Path) -> InputError:
    with pytest.raises(InputError) as caught:
        load_protocol(path)
    return caught.value


@pytest.mark.parametrize("path", sorted(PROTOCOLS.glob("*.yaml")), ids=lambda p: p.name)
def test_example_protocols_load(path: Path) -> None:
    loaded = load_protocol(path)
    assert loaded.protocol.name
    assert len(loaded.loop_values) == len(loaded.protocol.loops)


# --- unknown keys -----------------------------------------------------------------------------


def test_unknown_top_level_key_suggests_the_right_one(write: Write) -> None:
    path = write("p.yaml", BASE + "alternaton: {cycles: 2}\n")
    error = error_of(path)
    assert error.key == ("alternaton",)
    assert error.line == line_of(path, "alternaton:")  # the line the misspelt key is written on
    assert "did you mean 'alternation'?" in str(error)


def test_unknown_nested_key_names_its_path(write: Write) -> None:
    path = write("p.yaml", BASE.replace("settle: 20 ms", "setle: 20 ms"))
    error = error_of(path)
    assert error.key == ("alternation", "setle")
    assert error.line == line_of(path, "setle:")
    assert "did you mean 'settle'?" in str(error)


def test_misspelt_required_key_is_reported_as_the_misspelling(write: Write) -> None:
    # 'readings' missing is a consequence; 'readngs' is what the user must fix.
    path = write("p.yaml", BASE.replace("readings:", "readngs:"))
    error = error_of(path)
    assert error.key == ("readngs",)
    assert "did you mean 'readings'?" in str(error)


def test_equally_close_suggestions_are_all_named(write: Write) -> None:
    path = write("p.yaml", BASE.replace("step: 45 deg", "stpe: 45 deg"))
    message = str(error_of(path))
    assert "'step'" in message and "'stop'" in message


def test_hopeless_key_lists_the_allowed_ones(write: Write) -> None:
    path = write("p.yaml", BASE + "zzzz: 1\n")
    message = str(error_of(path))
    assert "allowed keys:" in message and "alternation" in message and "loops" in message


# --- extends ----------------------------------------------------------------------------------


def test_extends_is_relative_to_the_file_not_the_working_folder(
    write: Write, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    write("shared/base.yaml", BASE)
    child = write("samples/b3/child.yaml", "extends: ../../shared/base.yaml\nname: child\n"
                                           "extends_anywhere: true\n")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    loaded = load_protocol(child)
    assert loaded.protocol.name == "child"
    assert loaded.protocol.sample.id == "demo-7"


def test_child_overrides_any_key_and_keeps_the_rest(write: Write) -> None:
    write("base.yaml", BASE)
    child = write("child.yaml", "extends: base.yaml\nname: child\nalternation: {cycles: 9}\n"
                                "sample: {channel: {width: 4 um}}\n")
    protocol = load_protocol(child).protocol
    assert protocol.name == "child"
    assert protocol.alternation.cycles == 9  # overridden
    assert protocol.alternation.pattern == "+0-"  # sibling kept from the base
    assert protocol.alternation.settle == pytest.approx(0.02)
    assert protocol.sample.channel.width == pytest.approx(4e-6)  # deep override
    assert protocol.sample.channel.length == pytest.approx(40e-6)  # deep sibling kept
    assert [layer.name for layer in protocol.sample.layers] == ["NiFe", "Pt"]


def test_lists_replace_rather_than_merge(write: Write) -> None:
    write("base.yaml", BASE)
    child = write("child.yaml", "extends: base.yaml\nloops:\n  - {axis: current, values: [3 mA]}\n"
                                "readings: {channels: [vxy]}\n")
    loaded = load_protocol(child)
    assert [loop.axis for loop in loaded.protocol.loops] == ["current"]
    assert loaded.loop_values == ((3e-3,),)
    assert loaded.protocol.readings.channels == ["vxy"]
    assert loaded.protocol.readings.per_step == 2  # the mapping around the list still merges


def test_three_levels(write: Write) -> None:
    write("a/b/c/base.yaml", BASE)
    write("a/b/c/d/middle.yaml",
          "extends: ../base.yaml\nname: middle\nalternation: {cycles: 2}\n")
    leaf = write("a/b/c/leaf.yaml", "extends: d/middle.yaml\nalternation: {pattern: '+-'}\n")
    protocol = load_protocol(leaf).protocol
    assert (protocol.name, protocol.alternation.cycles, protocol.alternation.pattern) == (
        "middle", 2, "+-"
    )


def test_extends_cycle_is_detected(write: Write) -> None:
    write("one.yaml", "extends: two.yaml\nname: one\n")
    two = write("two.yaml", "extends: one.yaml\nname: two\n")
    error = error_of(two)
    assert "cycle" in error.problem
    assert error.key == ("extends",)


def test_extends_missing_base_names_the_referring_line(write: Write) -> None:
    child = write("child.yaml", "# comment\nname: x\nextends: nowhere/base.yaml\n")
    error = error_of(child)
    assert error.file is not None and error.file.endswith("child.yaml")
    assert error.line == line_of(child, "extends:")
    assert error.key == ("extends",)
    assert "nowhere/base.yaml" in error.problem and "does not exist" in error.problem


def test_error_in_the_base_points_into_the_base(write: Write) -> None:
    base = write("base.yaml", BASE.replace("settle: 20 ms", "settle: 20"))
    child = write("child.yaml", "extends: base.yaml\nname: child\n")
    error = error_of(child)
    assert error.file == str(base)
    assert error.line == line_of(base, "settle: 20}")
    assert error.key == ("alternation", "settle")


def test_error_in_a_replaced_list_points_into_the_child(write: Write) -> None:
    write("base.yaml", BASE)
    child = write("child.yaml", "extends: base.yaml\n\nloops:\n"
                                "  - {axis: current, values: [2]}\n")
    error = error_of(child)
    assert error.file == str(child)
    assert error.line == line_of(child, "values: [2]")
    assert error.key == ("loops", 0, "values", 0)


# --- key paths and lines ----------------------------------------------------------------------


def test_key_path_format() -> None:
    assert format_key_path(("loops", 2, "values", 0)) == "loops[2].values[0]"
    assert format_key_path(("sample", "layers", 1, "thickness")) == "sample.layers[1].thickness"
    assert format_key_path(()) == "(top level)"


def test_one_line_names_file_line_key_problem_and_fix() -> None:
    error = InputError("is bad", file="p.yaml", key=("loops", 1, "step"), line=7, fix="fix it")
    assert error.one_line() == "p.yaml:7: loops[1].step: is bad -- fix: fix it"


def test_duplicate_key_names_both_lines(write: Write) -> None:
    path = write("p.yaml", BASE + "\nname: again\n")
    error = error_of(path)
    assert error.key == ("name",)
    assert error.line == line_of(path, "name: again")
    assert f"line {line_of(path, 'name: base')}" in error.problem


def test_tab_error_names_the_key_on_that_line(write: Write) -> None:
    path = write("p.yaml", BASE.replace("readings: {", "readings:\t{"))
    error = error_of(path)
    assert error.line == line_of(path, "\t")
    assert error.key == ("readings",)


def test_loop_errors_point_at_the_loop_line(write: Write) -> None:
    path = write("p.yaml", BASE.replace("step: 45 deg", "step: -45 deg"))
    error = error_of(path)
    assert error.key == ("loops", 1, "step")
    assert error.line == line_of(path, "step: -45 deg")


# --- check --show -----------------------------------------------------------------------------


def shown(result: CliResult) -> dict:
    assert result.code == 0, result.err
    *body, last = result.out.strip().splitlines()
    assert last.startswith("ok: ")
    return yaml.safe_load("\n".join(body))


def test_show_prints_the_merged_unit_normalised_protocol(
    write: Write, cli: Callable[[list[str]], CliResult]
) -> None:
    write("base.yaml", BASE)
    child = write("child.yaml", "extends: base.yaml\nname: shown child\n"
                                "alternation: {settle: 0.1 s}\n"
                                "loops:\n  - {axis: field, values: [300 Oe, 1 kOe]}\n"
                                "  - {axis: current, values: [1500 uA]}\n")
    data = shown(cli(["check", str(child), "--show"]))
    assert data["name"] == "shown child"  # from the child
    assert data["sample"]["id"] == "demo-7"  # from the base
    assert data["alternation"] == {"pattern": "+0-", "cycles": 4, "settle_s": 0.1}
    field, current = data["loops"]
    assert field["axis"] == "field" and field["unit"] == "T"
    # 300 Oe and 1 kOe as mu0*H (1 Oe = 1000/(4 pi) A/m, SI Brochure 8th ed. Table 9)
    assert field["values"] == pytest.approx([0.03, 0.1], rel=1e-9)
    assert current["values"] == pytest.approx([1.5e-3], rel=1e-12)
    assert data["sample"]["layers"][1]["resistivity_ohm_m"] == pytest.approx(30e-8, rel=1e-12)
    assert data["sample"]["layers"][1]["carrier"] is True
    assert data["limits"]["current_A"] == pytest.approx(5e-3, rel=1e-12)


def test_show_expands_ranges(cli: Callable[[list[str]], CliResult]) -> None:
    data = shown(cli(["check", str(PROTOCOLS / "current_ladder.yaml"), "--show",
                      "--rig", str(SIMULATED_RIG)]))
    currents = next(loop for loop in data["loops"] if loop["axis"] == "current")["values"]
    # 0.5 mA to 4 mA in 0.5 mA steps: 8 values, both ends included
    assert currents == pytest.approx([0.5e-3 * k for k in range(1, 9)], rel=1e-12)
