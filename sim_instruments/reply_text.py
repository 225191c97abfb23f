"""The other side of drivers.replies: how a simulated instrument writes a value as reply text.

Each reply spec a dialect may use gets a writer whose output the spec's parser reads back.
For a regular-expression spec the writer is derived from the expression: the text around the
group becomes literal text, the group a number format it accepts.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from drivers.replies import NUMBER, SCPI_ERROR, TEXT, FlagReply, PatternReply, reply_parser

ReplyWriter = Callable[[object], str]

# Literal text in a reply pattern may use these; anything else is ambiguous to write.
_WHITESPACE = {r"\s*": "", r"\s+": " ", r"\s": " ", r"\ ": " "}
_METACHARACTERS = set(".^$*+?{}[]|()")
# Tried in order; the first the group accepts for negative, small and large values is used.
_NUMBER_FORMATS = ("{:+.9E}", "{:.9g}", "{:.9e}", "{:.6f}", "{:.0f}")
_PROBE_VALUES = (-1.234e-3, 0.0, 12.5, 3.0e5)


def _scpi_number(value: object) -> str:
    return f"{float(value):+.9E}"  # type: ignore[arg-type]


def _literal(fragment: str, spec: str) -> str:
    out, index = [], 0
    while index < len(fragment):
        repeated = fragment[index : index + 3]
        if repeated in (r"\s*", r"\s+"):
            out.append(_WHITESPACE[repeated])
            index += 3
            continue
        char = fragment[index]
        if char == "\\" and index + 1 < len(fragment):
            escaped = fragment[index : index + 2]
            if escaped in _WHITESPACE:
                out.append(_WHITESPACE[escaped])
            elif fragment[index + 1].isalnum():
                raise ValueError(f"cannot write a simulated reply for {spec!r}: {escaped}")
            else:
                out.append(fragment[index + 1])
            index += 2
            continue
        if char in _METACHARACTERS:
            raise ValueError(
                f"cannot write a simulated reply for {spec!r}: {char!r} outside the group"
            )
        out.append(char)
        index += 1
    return "".join(out)


def _group_span(spec: str) -> tuple[int, int]:
    """Index of the capturing group's '(' and of its ')'."""
    depth, start, index, in_class = 0, -1, 0, False
    while index < len(spec):
        char = spec[index]
        if char == "\\":
            index += 2
            continue
        if in_class:
            in_class = char != "]"
        elif char == "[":
            in_class = True
        elif char == "(":
            if depth == 0:
                start = index
            depth += 1
        elif char == ")":
            depth -= 1
            if depth == 0:
                return start, index
        index += 1
    raise ValueError(f"reply pattern {spec!r} has no group")


def _pattern_writer(parser: PatternReply) -> ReplyWriter:
    spec = parser.spec
    start, end = _group_span(spec)
    prefix, suffix = spec[:start].removeprefix("^"), spec[end + 1 :].removesuffix("$")
    head, tail = _literal(prefix, spec), _literal(suffix, spec)
    for number_format in _NUMBER_FORMATS:
        def write(value: object, number_format: str = number_format) -> str:
            return head + number_format.format(float(value)) + tail  # type: ignore[arg-type]

        if all(_reads_back(parser, write, probe) for probe in _PROBE_VALUES):
            return write
    raise ValueError(f"cannot write a number that {spec!r} reads back")


def _reads_back(parser: PatternReply, write: ReplyWriter, value: float) -> bool:
    try:
        return math.isclose(parser.parse(write(value)), value, rel_tol=1e-5, abs_tol=1e-9)
    except ValueError:
        return False


def reply_writer(spec: str) -> ReplyWriter:
    """value -> reply text for a reply spec; ValueError if no text of the spec can be written."""
    if spec == NUMBER:
        return _scpi_number
    if spec == TEXT:
        return str
    if spec == SCPI_ERROR:
        return str
    parser = reply_parser(spec)
    if isinstance(parser, FlagReply):
        true_word, false_word = parser.true_words[0], parser.false_words[0]
        return lambda value: true_word if value else false_word
    assert isinstance(parser, PatternReply)
    return _pattern_writer(parser)
