"""`flipsweep check, estimate, schema`: examples pass, schemas describe the files, exit codes."""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import yaml

from acquire.inputs.yaml_source import load_document
from tests.conftest import PROTOCOLS, REPO, SIMULATED_RIG, CliResult

Cli = Callable[[list[str]], CliResult]
EXAMPLES = sorted(PROTOCOLS.glob("*.yaml"))
RIGS = sorted((PROTOCOLS / "rigs").glob("*.yaml"))


@pytest.mark.parametrize("command", ["check", "estimate"])
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_every_example_passes_with_the_simulated_rig(
    path: Path, command: str, cli: Cli, no_visa: list
) -> None:
    result = cli([command, str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 0, result.err
    assert result.err == ""
    assert no_visa == []


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_every_example_passes_without_a_rig(path: Path, cli: Cli) -> None:
    result = cli(["check", str(path)])
    assert result.code == 0, result.err
    assert "rig limits not checked" in result.out


def test_check_says_ok_with_the_rig_name(cli: Cli) -> None:
    result = cli(["check", str(PROTOCOLS / "angle_scan.yaml"), "--rig", str(SIMULATED_RIG)])
    assert result.out.strip().splitlines()[-1] == (
        f"ok: {PROTOCOLS / 'angle_scan.yaml'} is valid with rig 'simulated rig'"
    )


def test_estimate_prints_counts_duration_and_density(cli: Cli) -> None:
    result = cli(["estimate", str(PROTOCOLS / "base.yaml"), "--rig", str(SIMULATED_RIG)])
    labels = [line.split()[0] for line in result.out.splitlines() if not line.startswith(" ")]
    for label in ("points", "readings", "duration", "peak"):
        assert label in labels
    assert "(carrier)" in result.out


@pytest.mark.parametrize(
    "argv, words",
    [
        (["check", "no/such/protocol.yaml"], "file not found"),
        (["check", str(PROTOCOLS / "base.yaml"), "--rig", "no/such/rig.yaml"], "file not found"),
        (["estimate", "no/such/protocol.yaml"], "file not found"),
    ],
)
def test_missing_files_exit_2_with_one_line(argv: list[str], words: str, cli: Cli) -> None:
    result = cli(argv)
    assert result.code == 2
    assert result.err.count("\n") == 1 and words in result.err


# --- schema -----------------------------------------------------------------------------------


def validate(instance: Any, schema: dict[str, Any], root: dict[str, Any], path: str = "") -> None:
    """The part of JSON Schema (2020-12) the generated schemas use; raises AssertionError."""
    if "$ref" in schema:
        name = schema["$ref"].removeprefix("#/$defs/")
        validate(instance, root["$defs"][name], root, path)
    if "anyOf" in schema:
        assert any(_valid(instance, option, root) for option in schema["anyOf"]), path
    if "oneOf" in schema:
        assert sum(_valid(instance, option, root) for option in schema["oneOf"]) == 1, path
    if "if" in schema:
        branch = "then" if _valid(instance, schema["if"], root) else "else"
        if branch in schema:
            validate(instance, schema[branch], root, path)
    if "const" in schema:
        assert instance == schema["const"], path
    if "enum" in schema:
        assert instance in schema["enum"], path
    kinds = schema.get("type")
    if kinds is not None:
        kinds = [kinds] if isinstance(kinds, str) else kinds
        assert any(_is_type(instance, kind) for kind in kinds), f"{path}: not {kinds}"
    if isinstance(instance, dict):
        for key in schema.get("required", []):
            assert key in instance, f"{path}: missing {key}"
        properties = schema.get("properties", {})
        extra = schema.get("additionalProperties", True)
        for key, value in instance.items():
            if key in properties:
                validate(value, properties[key], root, f"{path}.{key}")
            elif extra is False:
                raise AssertionError(f"{path}: {key} is not allowed")
            elif isinstance(extra, dict):
                validate(value, extra, root, f"{path}.{key}")
    if isinstance(instance, list):
        assert len(instance) >= schema.get("minItems", 0), path
        for index, item in enumerate(instance):
            if "items" in schema:
                validate(item, schema["items"], root, f"{path}[{index}]")
    if isinstance(instance, str):
        assert len(instance) >= schema.get("minLength", 0), path
    if _is_type(instance, "number"):
        assert instance >= schema.get("minimum", -float("inf")), path
        assert instance <= schema.get("maximum", float("inf")), path


def _valid(instance: Any, schema: dict[str, Any], root: dict[str, Any]) -> bool:
    try:
        validate(instance, schema, root)
    except AssertionError:
        return False
    return True


def _is_type(value: Any, kind: str) -> bool:
    if isinstance(value, bool):
        return kind == "boolean"
    return {
        "object": isinstance(value, dict), "array": isinstance(value, list),
        "string": isinstance(value, str), "integer": isinstance(value, int),
        "number": isinstance(value, (int, float)), "null": value is None, "boolean": False,
    }[kind]


@pytest.fixture(scope="module")
def schemas(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict[str, Any]]:
    from tests.conftest import run_cli

    out = tmp_path_factory.mktemp("schema")
    result = run_cli(["schema", "--out", str(out)])
    assert result.code == 0, result.err
    return {name: json.loads((out / f"{name}.schema.json").read_text(encoding="utf-8"))
            for name in ("protocol", "rig")}


def test_schemas_list_the_top_level_keys(schemas: dict[str, dict[str, Any]]) -> None:
    protocol, rig = schemas["protocol"], schemas["rig"]
    for key in ("name", "sample", "loops", "alternation", "readings", "waits", "limits",
                "finish", "extends"):
        assert key in protocol["properties"], key
    for key in ("name", "visa_library", "mains_frequency", "instruments", "extends"):
        assert key in rig["properties"], key
    assert protocol["additionalProperties"] is False
    assert set(protocol["else"]["required"]) >= {"name", "sample", "loops", "readings", "limits"}


@pytest.mark.parametrize("path", EXAMPLES + RIGS, ids=lambda p: p.name)
def test_schemas_accept_the_example_files(
    path: Path, schemas: dict[str, dict[str, Any]]
) -> None:
    schema = schemas["rig" if path.parent.name == "rigs" else "protocol"]
    raw = yaml.safe_load(path.read_text(encoding="utf-8"))
    validate(raw, schema, schema)  # the file as written, `extends` and all
    merged = load_document(path).data
    validate(merged, schema, schema)  # and after merging its base files


def test_schema_rejects_what_the_loader_rejects(schemas: dict[str, dict[str, Any]]) -> None:
    schema = schemas["protocol"]
    good = load_document(PROTOCOLS / "angle_scan.yaml").data
    assert _valid(good, schema, schema)
    assert not _valid({**good, "alternaton": {}}, schema, schema)  # unknown key
    assert not _valid({k: v for k, v in good.items() if k != "readings"}, schema, schema)
    bad_loop = {**good, "loops": [{"axis": "voltage", "values": ["1 V"]}]}
    assert not _valid(bad_loop, schema, schema)


def _quantity_properties(schema: dict[str, Any]) -> list[tuple[str, dict[str, Any]]]:
    """(name, property) of every quantity key (a string with a unit example) in the schema."""
    found = []
    for definition in [schema, *schema.get("$defs", {}).values()]:
        for name, prop in definition.get("properties", {}).items():
            for option in [prop, *prop.get("anyOf", [])]:
                if option.get("type") == "string" and option.get("examples"):
                    found.append((name, prop))
    return found


@pytest.mark.parametrize("kind", ["protocol", "rig"])
def test_schema_defaults_of_quantities_carry_their_unit(
    kind: str, schemas: dict[str, dict[str, Any]]
) -> None:
    quantities = _quantity_properties(schemas[kind])
    assert len(quantities) >= 5
    for name, prop in quantities:
        default = prop.get("default")
        assert default is None or isinstance(default, str), f"{name}: bare default {default!r}"


def test_a_protocol_of_schema_defaults_is_accepted_and_means_the_defaults(
    schemas: dict[str, dict[str, Any]], tmp_path: Path, cli: Cli
) -> None:
    from acquire.inputs.load import load_protocol

    schema = schemas["protocol"]
    given = load_document(PROTOCOLS / "angle_scan.yaml").data
    written = {key: prop["default"] for key, prop in schema["properties"].items()
               if "default" in prop and prop["default"] is not None}
    assert {"waits", "finish", "on_problem", "alternation"} <= set(written)
    protocol = {**given, **written}
    path = tmp_path / "defaults.yaml"
    path.write_text(yaml.safe_dump(protocol, sort_keys=False), encoding="utf-8")
    result = cli(["check", str(path), "--rig", str(SIMULATED_RIG)])
    assert result.code == 0, result.err
    # Every default copied from the schema means what leaving the key out means.
    explicit = load_protocol(path).protocol
    fields = type(explicit).model_fields
    for key in written:
        assert getattr(explicit, key) == fields[key].get_default(call_default_factory=True), key


def test_a_rig_entry_of_schema_defaults_means_the_defaults(
    schemas: dict[str, dict[str, Any]], tmp_path: Path
) -> None:
    from acquire.inputs.load import load_rig

    schema = schemas["rig"]
    spec = schema["$defs"]["VoltmeterSpec"]["properties"]
    defaults = {key: prop["default"] for key, prop in spec.items()
                if prop.get("default") not in (None, {}) and key != "limits"}
    assert defaults["timeout"] == "5 s" and defaults["latency"] == "0.002 s"
    rig = yaml.safe_load(SIMULATED_RIG.read_text(encoding="utf-8"))
    rig["instruments"]["vxx"].update(defaults)
    path = tmp_path / "rig.yaml"
    path.write_text(yaml.safe_dump(rig, sort_keys=False), encoding="utf-8")
    explicit = load_rig(path).rig.instruments["vxx"]
    implicit = load_rig(SIMULATED_RIG).rig.instruments["vxx"]
    assert explicit == implicit


# --- the console entry, in a real subprocess ---------------------------------------------------


def run_module(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "acquire.cli", *args], cwd=REPO,
                          capture_output=True, text=True, timeout=60)


def test_subprocess_check_ok() -> None:
    done = run_module("check", "protocols/angle_scan.yaml",
                      "--rig", "protocols/rigs/simulated.yaml")
    assert done.returncode == 0, done.stderr
    # The pattern's properties come first; the verdict is the last line.
    assert done.stdout.strip().splitlines()[-1].startswith("ok: ")


def test_subprocess_bad_input_exits_2_with_one_line() -> None:
    done = run_module("check", "tests/bad_inputs/pattern_no_minus.yaml",
                      "--rig", "protocols/rigs/simulated.yaml")
    assert done.returncode == 2
    assert len(done.stderr.splitlines()) == 1
    assert "Traceback" not in done.stderr and "pattern_no_minus.yaml" in done.stderr


def test_subprocess_version() -> None:
    done = run_module("--version")
    assert done.returncode == 0 and done.stdout.startswith("flipsweep ")
