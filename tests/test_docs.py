"""docs/: the generated references match the code, the hand-written pages match what the code
does, and the README's template table matches the dialect files."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest

from acquire.reference import GENERATED, stale_docs, write_docs
from drivers.dialect import role_dialect
from sim_instruments.stoner_wohlfarth import field_direction
from tests.conftest import REPO, CliResult, run_cli

DOCS = REPO / "docs"


def test_the_generated_pages_are_current() -> None:
    stale = stale_docs(DOCS)
    assert not stale, f"regenerate with 'flipsweep docs --out docs': {stale} differ from the code"


def test_docs_check_names_a_stale_page(tmp_path: Path) -> None:
    write_docs(tmp_path)
    assert run_cli(["docs", "--check", str(tmp_path)]).code == 0
    page = tmp_path / "rig.md"
    text = page.read_text(encoding="utf-8")
    page.write_text(text.replace("## Role", "## A role"), encoding="utf-8")
    (tmp_path / "output.md").unlink()
    result: CliResult = run_cli(["docs", "--check", str(tmp_path)])
    assert result.code == 1
    assert "rig.md" in result.err and "output.md" in result.err
    assert "protocol.md" not in result.err


def test_every_key_of_the_models_is_in_the_protocol_and_rig_pages() -> None:
    from acquire.modes import all_modes
    from drivers.roles import all_roles

    protocol, rig = GENERATED["protocol.md"](), GENERATED["rig.md"]()
    for mode in all_modes():
        for name, info in mode.protocol_model.model_fields.items():
            assert f"| `{info.alias or name}` |" in protocol, name
    for role in all_roles():
        assert f"## Role `{role.name}`" in rig
        for key in role.setting_keys | role.limit_keys:
            assert f"| `{key}` |" in rig, (role.name, key)
        for template in role_dialect(role.name).commands:
            assert f"| `{template}` |" in rig, (role.name, template)


def test_every_column_of_every_mode_is_in_the_output_page() -> None:
    from acquire.modes import all_modes

    page = GENERATED["output.md"]()
    for mode in all_modes():
        for schema in mode.tables():
            assert f"### {schema.file_name}" in page
            for column in schema.columns:
                assert f"| `{column.name}` | {column.datatype} |" in page, column.name


def test_readme_and_docs_link_only_to_files_that_exist() -> None:
    for page in [REPO / "README.md", *DOCS.glob("*.md")]:
        for target in re.findall(r"\]\(([^)#]+)\)", page.read_text(encoding="utf-8")):
            if "://" not in target:
                assert (page.parent / target).exists(), f"{page.name} links to {target}"


# --- conventions.md against the code that points the simulated field --------------------------

AXES = {"+x": (1.0, 0.0, 0.0), "+y": (0.0, 1.0, 0.0), "+z": (0.0, 0.0, 1.0)}


def plane_rows() -> dict[str, list[str]]:
    text = (DOCS / "conventions.md").read_text(encoding="utf-8")
    rows = {}
    for line in text.splitlines():
        cells = [cell.strip() for cell in line.strip().strip("|").split("|")]
        if len(cells) == 6 and re.fullmatch(r"`(xy|zx|zy)`", cells[0]):
            rows[cells[0].strip("`")] = cells
    return rows


@pytest.mark.parametrize("plane", ["xy", "zx", "zy"])
def test_the_rotation_plane_table_is_what_the_field_does(plane: str) -> None:
    _, at_zero, at_ninety, _, formula, _ = plane_rows()[plane]
    assert field_direction(0.0, plane) == pytest.approx(AXES[at_zero.split()[0]], abs=1e-15)
    assert field_direction(90.0, plane) == pytest.approx(AXES[at_ninety.split()[0]], abs=1e-15)
    # The written formula, evaluated with Python's math at a few angles.
    components = re.sub(r"(cos|sin) a", r"\1(a)", formula.strip("()")).split(",")
    for degrees in (17.0, 123.0, 301.0):
        a = math.radians(degrees)
        written = [eval(part, {"cos": math.cos, "sin": math.sin, "a": a})
                   for part in components]
        assert field_direction(degrees, plane) == pytest.approx(written, abs=1e-12)


# --- README's dialect table against the dialect files ------------------------------------------


def test_the_readme_template_table_matches_the_dialects() -> None:
    text = (REPO / "README.md").read_text(encoding="utf-8")
    checked = 0
    for line in text.splitlines():
        if not line.startswith("| "):
            continue
        cells = [cell.strip() for cell in line.strip().strip("|").split("|")]
        if len(cells) != 5 or cells[0] in ("role", "---") or "/" in cells[1]:
            continue
        if cells[0] == "all" or "reply only" in cells[1]:
            continue
        role, template = cells[0], cells[1]
        written = re.search(r"`([^`]*)`", cells[2])
        assert written is not None, line
        assert role_dialect(role).commands[template] == written.group(1), line
        checked += 1
    assert checked >= 15  # the table lists every single template of the five roles


# --- the README's first command does what it says ----------------------------------------------


def test_the_readmes_main_command_runs_fits_and_reports(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    text = (REPO / "README.md").read_text(encoding="utf-8")
    command = next(line.strip() for line in text.splitlines()
                   if line.startswith("    python3 -m venv") and "flipsweep run" in line)
    steps = [step.split() for step in command.split(" && ") if step.startswith("flipsweep ")]
    assert [step[1] for step in steps] == ["run", "fit", "report"]
    monkeypatch.chdir(REPO)  # the README's paths are relative to the project
    out = str(tmp_path / "demo")
    for step in steps:
        result = run_cli([out if word == "runs/demo" else word for word in step[1:]])
        assert result.code == 0, (step, result.err)
    for made in ("points.csv", "fits.csv", "report.html", "figures"):
        assert (tmp_path / "demo" / made).exists(), made
