"""The corpus of bad input files: each one is refused with exit 2 and one clear line.

Every tests/bad_inputs/*.yaml starts with two comment lines:
    # expect: <a substring of the error>
    # key: <the key path the error must name>
Files named rig_*.yaml are rig files, checked with a good protocol; the others are protocols,
checked with the simulated rig.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from tests.conftest import PROTOCOLS, SIMULATED_RIG, CliResult

CORPUS = Path(__file__).with_name("bad_inputs")
CASES = sorted(CORPUS.glob("*.yaml"))
GOOD_PROTOCOL = PROTOCOLS / "base.yaml"

# The kinds of mistake the corpus must keep covering (kind -> one of its files).
REQUIRED = {
    "wrong type": "wrong_type_cycles",
    "missing unit": "missing_unit_current",
    "wrong dimension": "wrong_dimension_field",
    "negative step": "negative_step",
    "empty loop": "empty_values",
    "no loops at all": "empty_loops",
    "zero width": "zero_width_step",
    "unknown role": "rig_unknown_role",
    "duplicate channel names (protocol)": "duplicate_channel_names",
    "duplicate channel names (rig)": "rig_duplicate_instrument_name",
    "duplicate YAML keys": "duplicate_yaml_key",
    "sample current limit": "limit_sample_current",
    "current density limit": "limit_current_density",
    "compliance voltage": "limit_compliance",
    "rig current limit": "limit_rig_current",
    "magnet field limit": "limit_field_magnet",
    "sample field limit": "limit_field_sample",
    "rig ramp-rate limit": "rig_ramp_rate_above_limit",
    "rotator range": "limit_rotator_max",
    "rotator backlash overshoot": "limit_rotator_backlash",
    "temperature range": "limit_temperature_rig",
    "pattern without +": "pattern_no_plus",
    "pattern without -": "pattern_no_minus",
    "pattern with bad characters": "pattern_bad_characters",
    "a list, not a mapping": "not_mapping_list",
    "a scalar, not a mapping": "not_mapping_scalar",
    "empty file": "empty_file",
    "tabs": "tab_indent",
    "unknown key with did-you-mean": "unknown_key_top",
    "missing required key": "missing_readings",
    "alternate_direction on the outermost loop": "alternate_direction_outermost",
    "a loop option in another program's words": "loop_unknown_true_false_key",
    "two loops on one axis": "same_axis_twice",
    "no current loop": "no_current_loop",
    "channel not in the rig": "channel_not_in_rig",
    "channel not a voltmeter": "channel_not_voltmeter",
    "log spacing through zero": "log_through_zero",
    "a stop the step does not reach": "loop_stop_off_the_grid",
    "num below 2": "num_below_two",
    "extends a missing file": "extends_missing",
    "extends cycle": "extends_cycle_a",
    "rig without a current limit": "rig_no_current_limit",
    "field supply without a ramp-rate limit": "rig_field_no_ramp_limit",
    "resource used twice": "rig_resource_twice",
    "setting on the wrong role": "rig_setting_wrong_role",
    "malformed driver path": "rig_driver_malformed",
    "min not below max": "rig_min_not_below_max",
    "arithmetic in a quantity": "quantity_arithmetic",
    "a device file as base": "extends_device_file",
    "a base outside the folder": "extends_outside_folder",
    "a relative temperature": "tolerance_celsius",
    "yes for a count": "cycles_yes",
    "over the point cap": "too_many_points",
    "density limit in a non-carrier layer": "limit_density_every_layer",
    "power limit": "limit_power",
    "alias bomb": "alias_bomb",
    "deep nesting": "nested_brackets",
    "garbage resource string": "rig_resource_garbage",
    "placeholder resource": "rig_resource_placeholder",
    "driver module not found": "rig_driver_not_found",
    "VISA library not found": "rig_visa_library_missing",
    "template scaling the value": "rig_template_scaled_current",
    "per_minute on a non-rate": "rig_template_per_minute_current",
}


def header(path: Path) -> tuple[str, str]:
    lines = path.read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith("# expect: "), f"{path.name}: first line must be '# expect: ...'"
    assert lines[1].startswith("# key: "), f"{path.name}: second line must be '# key: ...'"
    return lines[0].removeprefix("# expect: "), lines[1].removeprefix("# key: ")


def argv_for(command: str, path: Path) -> list[str]:
    if path.name.startswith("rig_"):
        return [command, str(GOOD_PROTOCOL), "--rig", str(path)]
    return [command, str(path), "--rig", str(SIMULATED_RIG)]


def test_the_corpus_is_large_and_covers_every_kind() -> None:
    assert len(CASES) >= 35
    names = {path.stem for path in CASES}
    missing = {kind: name for kind, name in REQUIRED.items() if name not in names}
    assert not missing


@pytest.mark.parametrize("command", ["check", "estimate"])
@pytest.mark.parametrize("path", CASES, ids=lambda p: p.stem)
def test_bad_input_is_refused_clearly(
    path: Path, command: str, cli: Callable[[list[str]], CliResult], no_visa: list
) -> None:
    expect, key = header(path)
    result = cli(argv_for(command, path))
    assert result.code == 2, (result.out, result.err)
    assert result.out == ""
    lines = result.err.splitlines()
    assert len(lines) == 1, result.err
    line = lines[0]
    assert "Traceback" not in line
    assert line.startswith("error: ")
    assert path.name in line, line
    assert expect in line, line
    assert f" {key}: " in line, line  # the key path, as written in the one-line format
    assert no_visa == []  # nothing was sent to any instrument


def test_the_good_files_used_beside_the_corpus_are_good(
    cli: Callable[[list[str]], CliResult]
) -> None:
    assert cli(["check", str(GOOD_PROTOCOL), "--rig", str(SIMULATED_RIG)]).code == 0
