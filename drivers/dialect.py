"""Command dialects as data: the templates and reply specs of a role, with a rig's overrides.

drivers/dialects/<role>.yaml holds a role's templates, common.yaml those every instrument
shares (IEEE 488.2 and the error queue). A template with a reply spec is a query; a template
with `{value}` takes a number in SI units. `{per_minute}` (the value times 60) is the one
named scaling, for the templates a dialect file lists under `rates:`. An empty template means
the instrument has no such command (allowed for the `optional` ones).

A rig's template is checked when it is loaded: the number an instrument reads from the
rendered text (the whole SCPI numeric token, decoded independently of the field that produced
it) must be the value itself, or the value with its declared scaling. "{value}E3" (a thousand
times the value), "1{value}", "{value:%}" or "{value:,}" are refused there, with the file and
the key, before anything can be sent.
"""

from __future__ import annotations

import re
import string
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from types import MappingProxyType
from typing import Any

import yaml

from drivers.errors import InputError
from drivers.replies import SCPI_ERROR, ReplyParser, reply_parser
from drivers.spec import InstrumentSpec

DIALECT_DIR = Path(__file__).with_name("dialects")
# The one reply entry that is not a template: what an instrument says to a message it
# does not understand.
REJECTED = "rejected"
ERROR_QUERY = "error_query"
# Value fields a template may use, and the factor from the SI value to the field's value.
VALUE_FIELDS: Mapping[str, float] = MappingProxyType({"value": 1.0, "per_minute": 60.0})
# How an instrument reads a number out of a command (SCPI-99 vol. 1, decimal numeric program
# data): sign, digits with an optional point, an optional exponent. The whole token counts, so
# a template that writes "{value}E3" is read as the instrument would read it, a thousand times
# the value.
NUMBER_TOKEN = re.compile(r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?")
# Characters that, just before the value field, an instrument would read as part of its number.
_NUMBER_START = frozenset("0123456789.+-")
# Values a template is rendered with at load time: round numbers every sane precision writes
# exactly, so any difference is a scaling, not rounding.
PROBE_VALUES = (2.0, 3.0, -2.0, 2000.0)


def read_number(command: str, at: int) -> float | None:
    """The number an instrument reads from `command` around position `at` (where the value
    field was rendered): the whole SCPI numeric token that covers it, or None."""
    start = at
    while start > 0 and command[start - 1] in _NUMBER_START:
        start -= 1
    if start == at:
        while start < len(command) and command[start] == " ":
            start += 1
    token = NUMBER_TOKEN.match(command, start)
    if token is None or token.end() <= at:
        return None
    return float(token.group())


@dataclass(frozen=True)
class Dialect:
    role: str
    commands: Mapping[str, str]
    reply_specs: Mapping[str, str]
    optional: frozenset[str]
    rejected: str
    rates: frozenset[str] = frozenset()  # templates that may use {per_minute}
    parsers: Mapping[str, ReplyParser] = field(init=False, repr=False, compare=False)
    value_fields: Mapping[str, str | None] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        parsers = {name: reply_parser(spec) for name, spec in self.reply_specs.items()}
        fields = {name: value_field(template) for name, template in self.commands.items()}
        object.__setattr__(self, "parsers", MappingProxyType(parsers))
        object.__setattr__(self, "value_fields", MappingProxyType(fields))

    def supports(self, name: str) -> bool:
        return bool(self.commands.get(name))

    def is_query(self, name: str) -> bool:
        return name in self.reply_specs

    def takes_value(self, name: str) -> bool:
        return self.value_fields[name] is not None

    def render(self, name: str, value: float | None = None) -> str:
        """The command text; only templates that take a value use `value`."""
        template = self.commands[name]
        if self.value_fields[name] is None:
            return template
        if value is None:
            raise ValueError(f"{self.role} command {name!r} needs a value")
        return template.format(value=value, per_minute=value * VALUE_FIELDS["per_minute"])

    def sent_value(self, name: str, value: float) -> float:
        """The number the instrument will read from the command text for `value`, in SI."""
        return self.decode(name, self.render(name, value))

    def decode(self, name: str, command: str) -> float:
        """The number (SI) an instrument reads from `command`, rendered from template `name`.

        Read from the text alone, as the instrument reads it: the whole numeric token around
        the place the template's value field starts (literal digits before it and an exponent
        after it included), divided by the field's declared scaling. A template's precision
        rounds (`{value:.2g}` sends 1.26 mA as 0.0013); limits are checked against this number.
        """
        field_name = self.value_fields[name]
        if field_name is None:
            raise ValueError(f"{self.role} command {name!r} sends no number")
        prefix = literal_prefix(self.commands[name], field_name)
        number = read_number(command, len(prefix)) if command.startswith(prefix) else None
        if number is None:
            raise ValueError(f"{command!r} carries no number where {name!r} puts its value")
        return number / VALUE_FIELDS[field_name]

    def render_not_above(self, name: str, value: float) -> str:
        """The command for `value`, rounded toward zero where the template's precision would
        round it up: for rates, where a hair slower is always safe."""
        target = value
        for attempt in range(64):
            sent = self.sent_value(name, target)
            if abs(sent) <= abs(value):
                return self.render(name, target)
            target -= (sent - value) * 2.0**attempt
        raise ValueError(f"{self.role} command {name!r} cannot send {value!r} without exceeding it")


def literal_prefix(template: str, field_name: str) -> str:
    """The literal text of `template` before its value field, as it is sent."""
    prefix = ""
    for literal, used, _, _ in string.Formatter().parse(template):
        prefix += literal
        if used == field_name:
            break
    return prefix.replace("{{", "{").replace("}}", "}")


def scaling_problem(template: str, field_name: str) -> str | None:
    """Why the number an instrument reads from `template` is not the value times its field's
    declared scaling, or None. Checked on round probe values, from the rendered text alone."""
    scale = VALUE_FIELDS[field_name]
    at = len(literal_prefix(template, field_name))
    for value in PROBE_VALUES:
        command = template.format(value=value, per_minute=value * VALUE_FIELDS["per_minute"])
        read = read_number(command, at)
        if read is None:
            return f"{template!r} renders {value:g} as {command!r}, which carries no number " \
                   "an instrument can read"
        if abs(read - value * scale) > 1e-9 * abs(value * scale):
            factor = read / (value * scale)
            per = "" if scale == 1 else " per minute"
            return (f"{template!r} sends {value:g} as {command!r}, which an instrument reads "
                    f"as {read:g} ({factor:g} times the value{per})")
    return None


def value_field(template: str) -> str | None:
    """The value field a template uses, or None; ValueError if it uses anything else."""
    used = {name for _, name, _, _ in string.Formatter().parse(template) if name is not None}
    unknown = used - set(VALUE_FIELDS)
    if unknown or len(used) > 1:
        raise ValueError(
            f"template {template!r} may use one of {{value}} or {{per_minute}}, "
            f"uses {', '.join('{' + n + '}' for n in sorted(used)) or 'none'}"
        )
    return next(iter(used), None)


def _read_dialect_file(path: Path) -> dict[str, Any]:
    data = yaml.safe_load(path.read_text(encoding="utf-8")) or {}
    return {
        "commands": dict(data.get("commands") or {}),
        "replies": dict(data.get("replies") or {}),
        "optional": set(data.get("optional") or ()),
        "rates": set(data.get("rates") or ()),
    }


@cache
def role_dialect(role: str) -> Dialect:
    """The default dialect of a role: common.yaml merged with <role>.yaml."""
    if not (DIALECT_DIR / f"{role}.yaml").is_file():
        raise ValueError(f"no dialect file for role {role!r} in {DIALECT_DIR}")
    common = _read_dialect_file(DIALECT_DIR / "common.yaml")
    own = _read_dialect_file(DIALECT_DIR / f"{role}.yaml")
    replies = {**common["replies"], **own["replies"]}
    rejected = str(replies.pop(REJECTED, ""))
    return Dialect(
        role=role,
        commands=MappingProxyType({**common["commands"], **own["commands"]}),
        reply_specs=MappingProxyType(replies),
        optional=frozenset(common["optional"] | own["optional"]),
        rejected=rejected,
        rates=frozenset(own["rates"]),
    )


def _problem(name: str, key: tuple[str, ...], problem: str, fix: str) -> InputError:
    return InputError(problem, key=("instruments", name, *key), fix=fix)


def _checked_template(base: Dialect, name: str, template_name: str, template: str) -> str:
    key = ("commands", template_name)
    if not isinstance(template, str):
        raise _problem(name, key, "a command template must be text", "quote it")
    if template == "":
        if template_name not in base.optional:
            raise _problem(
                name, key, f"'{template_name}' cannot be blank: the {base.role} driver needs it",
                f"give the instrument's command for {template_name}",
            )
        return template
    try:
        used = value_field(template)
    except ValueError as error:
        raise _problem(name, key, str(error), "use {value:.6g} or {per_minute:.6g}") from None
    default_takes_value = base.value_fields[template_name] is not None
    if default_takes_value and used is None:
        raise _problem(
            name, key, f"'{template_name}' sends a number but {template!r} has no {{value}}",
            f"e.g. {base.commands[template_name]!r}",
        )
    if not default_takes_value and used is not None:
        raise _problem(
            name, key, f"'{template_name}' sends no number but {template!r} has a value field",
            f"e.g. {base.commands[template_name]!r}",
        )
    if used is not None:
        try:
            template.format(value=1.0, per_minute=60.0)
        except (ValueError, IndexError, KeyError) as error:
            raise _problem(
                name, key, f"template {template!r} cannot format a number: {error}",
                "use a float format such as {value:.6g}",
            ) from None
        if used == "per_minute" and template_name not in base.rates:
            raise _problem(
                name, key, f"'{template_name}' is not a rate, so it cannot use {{per_minute}} "
                f"(the value times 60)", f"e.g. {base.commands[template_name]!r}",
            )
        problem = scaling_problem(template, used)
        if problem is not None:
            raise _problem(
                name, key, f"{problem}; the number must be the value itself"
                + (" or, for a rate, {per_minute}" if template_name in base.rates else ""),
                f"e.g. {base.commands[template_name]!r}",
            )
    return template


def _checked_reply(base: Dialect, name: str, reply_name: str, spec: str) -> str:
    key = ("replies", reply_name)
    if not isinstance(spec, str):
        raise _problem(name, key, "a reply spec must be text", "quote it")
    if reply_name == REJECTED:
        return spec
    if reply_name == ERROR_QUERY and spec != SCPI_ERROR:
        raise _problem(
            name, key, "the error queue is read as SCPI entries only",
            "blank the error_query command instead if the instrument has no SCPI error queue",
        )
    try:
        reply_parser(spec)
    except ValueError as error:
        raise _problem(name, key, str(error), "see the replies table in README") from None
    return spec


def dialect_for(name: str, spec: InstrumentSpec) -> Dialect:
    """The dialect of one rig instrument: its role's, with the rig's `commands`/`replies`.

    Raises InputError (key path into the rig file, no file name) for unknown template names,
    blanked required commands, templates whose value field does not fit, malformed replies.
    """
    base = role_dialect(spec.role)
    commands = dict(base.commands)
    for template_name, template in spec.commands.items():
        if template_name not in base.commands:
            raise _problem(
                name, ("commands", template_name),
                f"unknown command template {template_name!r} for a {spec.role}",
                f"valid names: {', '.join(sorted(base.commands))}",
            )
        commands[template_name] = _checked_template(base, name, template_name, template)
    replies = dict(base.reply_specs)
    rejected = base.rejected
    for reply_name, reply_spec in spec.replies.items():
        if reply_name != REJECTED and reply_name not in base.reply_specs:
            valid = sorted([*base.reply_specs, REJECTED])
            raise _problem(
                name, ("replies", reply_name),
                f"{reply_name!r} is not a query of a {spec.role}",
                f"valid names: {', '.join(valid)}",
            )
        checked = _checked_reply(base, name, reply_name, reply_spec)
        if reply_name == REJECTED:
            rejected = checked
        else:
            replies[reply_name] = checked
    return Dialect(
        role=spec.role,
        commands=MappingProxyType(commands),
        reply_specs=MappingProxyType(replies),
        optional=base.optional,
        rejected=rejected,
        rates=base.rates,
    )


def validate_dialects(instruments: Mapping[str, InstrumentSpec]) -> dict[str, Dialect]:
    """Every instrument's dialect, or the first InputError (key path into the rig file).
    Sends nothing to any instrument."""
    return {name: dialect_for(name, spec) for name, spec in instruments.items()}
