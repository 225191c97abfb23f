"""docs/rig.md: every key of a rig file, role by role from the role registry, with each role's
command templates from its dialect file and the simulated sample's settings."""

from __future__ import annotations

import dataclasses
from typing import Any

import yaml

from acquire.reference import markdown
from acquire.reference.fields import section_docs
from drivers.dialect import DIALECT_DIR, REJECTED, role_dialect
from drivers.rig import Rig
from drivers.roles import all_roles
from drivers.roles.base import Role
from drivers.spec import COMMON_KEYS, InstrumentSpec
from sim_instruments.sample_model import SampleParameters
from sim_instruments.world import (
    START_TEMPERATURE_K,
    TEMPERATURE_TIME_CONSTANT_S,
    WORLD_SETTINGS,
)

INTRO = """
A rig file names each instrument, its role, how to reach it (its VISA resource) and its
hardware limits: the most this setup may ever do, whatever a protocol asks. `flipsweep check
PROTOCOL --rig RIG` checks every value a protocol can send against them, and the run guards
every command again. `protocols/rigs/real_rig_template.yaml` is a commented starting point;
`protocols/rigs/simulated.yaml` is the built-in simulated rig. `extends: base.yaml` works as in
a protocol. Every quantity carries its unit; a bare number is an error.

Each role speaks a generic SCPI-style dialect (its templates are listed under the role). A rig
entry overrides templates by name under `commands:` and reply specs under `replies:`; `""`
blanks an optional command the instrument lacks. Values go out in SI; a template takes
`{value}`, or `{per_minute}` (the value x 60) for an instrument that wants rates per minute.
Reply specs are `number`, `text`, `scpi_error`, `true=WORD,WORD; false=WORD,...` for yes/no
replies, or a regular expression with one group around the number.
"""


def _common_templates() -> dict[str, Any]:
    return yaml.safe_load((DIALECT_DIR / "common.yaml").read_text(encoding="utf-8"))


def _template_units(role: Role[Any]) -> dict[str, str]:
    units = {limit.template: limit.quantity.si_unit for limit in role.template_limits}
    if role.axis is not None:
        units.setdefault(role.axis.template, role.axis.quantity.si_unit)
    return units


def _dialect_table(role: Role[Any], skip: set[str]) -> str:
    dialect = role_dialect(role.name)
    units = _template_units(role)
    rows = []
    for name, template in dialect.commands.items():
        if name in skip:
            continue
        unit = f" ({units[name]})" if name in units else ""
        rows.append((f"`{name}`", f"`{template}`{unit}", dialect.reply_specs.get(name, "-"),
                     "yes" if name in dialect.optional else "no"))
    return markdown.table(("template", "default", "reply", "optional"), rows)


def _common_section() -> str:
    common = _common_templates()
    commands, replies = common["commands"], common["replies"]
    rows = [(f"`{name}`", f"`{template}`", replies.get(name, "-"),
             "yes" if name in common.get("optional", []) else "no")
            for name, template in commands.items()]
    rows.append((f"`{REJECTED}` (reply only)", f"`{replies.get(REJECTED, '')}`",
                 "what the instrument answers to a message it does not understand "
                 "(`\"\"`: it stays silent)", "-"))
    return "\n".join([
        "## Templates every role shares", "",
        "IEEE 488.2 common commands and the SCPI error queue (drivers/dialects/common.yaml).", "",
        markdown.table(("template", "default", "reply", "optional"), rows), "",
    ])


def _common_keys_section() -> str:
    doc = section_docs(InstrumentSpec, "instruments.<name>",
                       skip=frozenset({"limits"}))[0]
    doc = dataclasses.replace(
        doc, summary="Keys every instrument entry takes, whatever its role; `limits` and the "
                     "role's own settings follow under each role.")
    return markdown.section(doc, 2, "Keys of every instrument (`instruments.<name>`)")


def _role_section(role: Role[Any]) -> str:
    how_many = "exactly one per rig" if role.required and role.at_most_one else (
        "at least one per rig" if role.required else
        "at most one per rig" if role.at_most_one else "any number")
    own = section_docs(role.spec, f"instruments.<name> (role: {role.name})",
                       skip=frozenset(COMMON_KEYS - {"limits"}))
    parts = [f"## Role `{role.name}`", "",
             f"{role.summary[0].upper()}{role.summary[1:]}; {how_many}."
             + (f" It moves the `{role.axis.name}` loop axis." if role.axis else ""), ""]
    settings = dataclasses.replace(own[0], summary="", keys=tuple(
        key for key in own[0].keys if key.key not in ("role", "limits")))
    parts.append(markdown.section(settings, 3, "Settings"))
    for limits in own[1:]:
        summary = "Hardware limits, checked before anything is sent and at every command."
        if not limits.keys:
            summary = "This role has no hardware limits."
        parts.append(markdown.section(dataclasses.replace(limits, summary=summary), 3,
                                      "Limits (`limits:`)"))
    shared = set(_common_templates()["commands"])
    parts += [f"### Command templates (drivers/dialects/{role.name}.yaml)", "",
              _dialect_table(role, shared), ""]
    return "\n".join(parts)


def _shown(value: object) -> str:
    if value is None:
        return "derived"  # from the protocol's sample (MODEL.md says how)
    return f"`{value:.6g}`" if isinstance(value, float) else f"`{value}`"


def _simulation_section() -> str:
    parameters = SampleParameters()
    world = {"start_temperature_K": START_TEMPERATURE_K,
             "temperature_time_constant_s": TEMPERATURE_TIME_CONSTANT_S}
    rows = [(f"`{name}`", "world", f"`{world[name]:.6g}`" if name in world else "")
            for name in WORLD_SETTINGS]
    rows += [(f"`{name}`", "sample model", _shown(getattr(parameters, name)))
             for name in SampleParameters.field_names()]
    return "\n".join([
        "## `simulation:` (simulated runs only)", "",
        "Settings of the simulated sample and world for `flipsweep run --simulate` and "
        "`flipsweep serve`, in SI units with the unit in the name; a real run ignores them. "
        "The geometry, the layers and the carrier's material come from the protocol's `sample:` "
        "section unless set here; `derived` values follow from them. "
        "sim_instruments/MODEL.md gives each parameter's meaning. An unknown name is an error "
        "at `check`.", "",
        markdown.table(("name", "of", "default"), rows), "",
    ])


def rig_page() -> str:
    top = section_docs(Rig, "", skip=frozenset({"instruments"}))[0]
    top = dataclasses.replace(top, summary="")
    body = [markdown.section(top, 2, "Top-level keys"),
            "`instruments:` maps each instrument's name (how protocols refer to it, e.g. a "
            "voltmeter's channel name) to its entry.",
            _common_keys_section(),
            *(_role_section(role) for role in all_roles()),
            _common_section(),
            _simulation_section()]
    return markdown.page("Rig file reference",
                         "drivers/rig.py, drivers/roles/, drivers/dialects/, "
                         "sim_instruments/sample_model.py", INTRO, body)
