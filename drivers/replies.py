"""How an instrument's reply text becomes a value: the reply specs a dialect or rig may name.

A reply spec is one short string, so a rig file can override it in `replies:`:

    number                  the reply is a plain number ("+1.234E-03")
    text                    the reply is kept as text (identity strings)
    scpi_error              an error-queue entry `<code>,"<message>"` (SCPI-99 vol. 1, SYST:ERR?)
    true=1,ON; false=0,OFF  a yes/no reply: the words meaning true and false (case-insensitive)
    anything else           a regular expression with one group holding the number,
                            e.g. `V=([-+0-9.Ee]+)` for a reply like `V=+1.2E-3`
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Protocol

NUMBER, TEXT, SCPI_ERROR = "number", "text", "scpi_error"


class ReplyFormatError(ValueError):
    """The reply did not have the form its spec promises."""


class ReplyParser(Protocol):
    @property
    def spec(self) -> str: ...

    def parse(self, reply: str) -> float | bool | str | tuple[int, str]: ...


@dataclass(frozen=True)
class NumberReply:
    spec: str = NUMBER

    def parse(self, reply: str) -> float:
        try:
            return float(reply)
        except ValueError:
            raise ReplyFormatError(f"expected a number, got {reply!r}") from None


@dataclass(frozen=True)
class TextReply:
    spec: str = TEXT

    def parse(self, reply: str) -> str:
        return reply.strip()


@dataclass(frozen=True)
class PatternReply:
    spec: str
    pattern: re.Pattern[str]

    def parse(self, reply: str) -> float:
        found = self.pattern.search(reply)
        if found is None:
            raise ReplyFormatError(f"reply {reply!r} does not match {self.spec!r}")
        try:
            return float(found.group(1))
        except ValueError:
            raise ReplyFormatError(
                f"{found.group(1)!r} (from {reply!r} by {self.spec!r}) is not a number"
            ) from None


@dataclass(frozen=True)
class FlagReply:
    spec: str
    true_words: tuple[str, ...]
    false_words: tuple[str, ...]

    def parse(self, reply: str) -> bool:
        word = reply.strip().upper()
        if word in self.true_words:
            return True
        if word in self.false_words:
            return False
        raise ReplyFormatError(
            f"expected one of {', '.join(self.true_words + self.false_words)}, got {reply!r}"
        )


# SCPI-99 vol. 1, SYSTem:ERRor[:NEXT]?: `<error number>,"<error description>"`, and
# `0,"No error"` once the queue is empty.
_SCPI_ERROR = re.compile(r'^\s*([-+]?\d+)\s*,\s*"?(.*?)"?\s*$')


@dataclass(frozen=True)
class ScpiErrorReply:
    spec: str = SCPI_ERROR

    def parse(self, reply: str) -> tuple[int, str]:
        found = _SCPI_ERROR.match(reply)
        if found is None:
            raise ReplyFormatError(f'expected <code>,"<message>", got {reply!r}')
        return int(found.group(1)), found.group(2)


def _flag_reply(spec: str) -> FlagReply:
    words: dict[str, tuple[str, ...]] = {}
    for part in spec.split(";"):
        key, _, listed = part.partition("=")
        key = key.strip().lower()
        if key not in ("true", "false") or key in words:
            raise ValueError(f"write a yes/no reply as 'true=1,ON; false=0,OFF', got {spec!r}")
        words[key] = tuple(w.strip().upper() for w in listed.split(",") if w.strip())
    if not words.get("true") or not words.get("false"):
        raise ValueError(f"a yes/no reply needs words for both true and false, got {spec!r}")
    if set(words["true"]) & set(words["false"]):
        raise ValueError(f"a word means both true and false in {spec!r}")
    return FlagReply(spec, words["true"], words["false"])


def _pattern_reply(spec: str) -> PatternReply:
    try:
        pattern = re.compile(spec)
    except re.error as error:
        raise ValueError(f"reply pattern {spec!r} is not a regular expression: {error}") from None
    if pattern.groups != 1:
        raise ValueError(
            f"reply pattern {spec!r} needs exactly one group around the number, "
            f"has {pattern.groups}"
        )
    return PatternReply(spec, pattern)


def is_flag_spec(spec: str) -> bool:
    return spec.strip().lower().startswith(("true=", "false="))


def reply_parser(spec: str) -> ReplyParser:
    """The parser a reply spec names; ValueError with the reason if the spec is malformed."""
    if spec == NUMBER:
        return NumberReply()
    if spec == TEXT:
        return TextReply()
    if spec == SCPI_ERROR:
        return ScpiErrorReply()
    if is_flag_spec(spec):
        return _flag_reply(spec)
    return _pattern_reply(spec)
