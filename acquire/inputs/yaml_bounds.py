"""Bounds on what a YAML input file may make the reader do: its size, its kind of file, how
deeply it nests, how long one list or mapping is, and how far aliases expand.

A protocol or rig is trusted configuration, but a mistake (a path to /dev/zero, a generated
file gone wrong, an alias used many times) must end in one clear line, not a hang, a memory
error or a traceback. The bounds are far beyond any real protocol: a loop holds at most
100,000 values, and no protocol section nests more than a few levels.
"""

from __future__ import annotations

import os
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from acquire.errors import InputError, KeyPath

MAX_FILE_BYTES = 4_000_000  # a 100,000-value list written one per line is about 1.5 MB
MAX_DEPTH = 32  # nested lists and mappings, aliases expanded
MAX_ITEMS = 100_000  # entries of one list or mapping (the longest loop)
MAX_NODES = 250_000  # values of the whole document with every alias expanded

# libyaml when installed (the same documents, much faster on a long list).
FAST_LOADER: Any = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def read_regular_file(path: Path, referenced_from: tuple[str, int] | None) -> str:
    """The UTF-8 text of a regular file of at most MAX_FILE_BYTES; InputError otherwise.

    `referenced_from` (file, line of its `extends:`) places the error on the key that named
    the file. Nothing of the file's content appears in a message.
    """
    def refuse(problem: str, fix: str) -> InputError:
        if referenced_from:
            file, line = referenced_from
            return InputError(f"extends {str(path)!r}, which {problem}", file=file,
                              key=("extends",), line=line, fix=fix)
        return InputError(problem, file=str(path), fix=fix)

    try:
        info = os.stat(path)
    except FileNotFoundError:
        if referenced_from:
            raise refuse("does not exist", "give a path relative to this file") from None
        raise InputError("file not found", file=str(path), fix="check the path") from None
    except OSError as error:
        raise refuse(f"cannot be read ({error.strerror})", "check the path") from None
    if not stat.S_ISREG(info.st_mode):
        raise refuse("is not a regular file", "name a YAML file (not a device, pipe or folder)")
    if info.st_size > MAX_FILE_BYTES:
        raise refuse(f"is larger than {MAX_FILE_BYTES // 1_000_000} MB",
                     "a protocol or rig file is a few kB; check that this is the right file")
    try:
        with open(path, "rb") as handle:
            raw = handle.read(MAX_FILE_BYTES + 1)
    except OSError as error:
        raise refuse(f"cannot be read ({error.strerror})", "check the file's permissions") \
            from None
    if len(raw) > MAX_FILE_BYTES:
        raise refuse(f"is larger than {MAX_FILE_BYTES // 1_000_000} MB",
                     "check that this is the right file")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        raise refuse("is not UTF-8 text", "save the file as UTF-8") from None


@dataclass
class _Frame:
    mapping: bool
    count: int = 0
    key: str | int | None = None


def _line(event: yaml.Event) -> int | None:
    return event.start_mark.line + 1 if event.start_mark is not None else None


def _path(frames: list[_Frame]) -> KeyPath:
    # The first few levels say where; thirty more "[0]" would not say more.
    return tuple(frame.key for frame in frames if frame.key is not None)[:4]


def check_shape(text: str, file: str) -> None:
    """Refuse a document that nests deeper than MAX_DEPTH or has a list or mapping longer than
    MAX_ITEMS, from the parser's events (before anything is built or recursed into).

    libyaml refuses deep nesting on its own, with no place to point at; the pure-Python
    parser (lazy and iterative) then finds the level and the key.
    """
    try:
        _check_shape(text, file, FAST_LOADER)
    except yaml.YAMLError:
        if FAST_LOADER is yaml.SafeLoader:
            raise
        _check_shape(text, file, yaml.SafeLoader)


def _check_shape(text: str, file: str, loader: Any) -> None:
    frames: list[_Frame] = []
    node_events = (yaml.ScalarEvent, yaml.AliasEvent, yaml.MappingStartEvent,
                   yaml.SequenceStartEvent)
    for event in yaml.parse(text, Loader=loader):
        if isinstance(event, node_events) and frames:
            frame = frames[-1]
            if not frame.mapping:
                frame.key = frame.count
            elif frame.count % 2 == 0:
                frame.key = str(event.value) if isinstance(event, yaml.ScalarEvent) else "?"
            frame.count += 1
            if frame.count > (2 * MAX_ITEMS if frame.mapping else MAX_ITEMS):
                raise InputError(
                    f"has more than {MAX_ITEMS} entries in one list or mapping", file=file,
                    key=_path(frames[:-1]), line=_line(event),
                    fix=f"keep each list to at most {MAX_ITEMS} values (the longest loop)",
                )
        if isinstance(event, (yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            frames.append(_Frame(isinstance(event, yaml.MappingStartEvent)))
            if len(frames) > MAX_DEPTH:
                raise InputError(
                    f"nests lists and mappings more than {MAX_DEPTH} levels deep", file=file,
                    key=_path(frames[:-1]), line=_line(event),
                    fix="check the brackets on that line",
                )
        elif isinstance(event, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
            frames.pop()


class _Recursive(Exception):
    def __init__(self, node: yaml.Node) -> None:
        self.node = node


@dataclass
class _Expansion:
    """Size and depth of a node graph with every alias expanded, memoised per node."""

    sizes: dict[int, tuple[int, int]] = field(default_factory=dict)

    def measure(self, root: yaml.Node) -> tuple[int, int]:
        # Iterative post-order: nodes are revisited through aliases, never recursed into twice.
        in_progress: set[int] = set()
        stack: list[tuple[yaml.Node, bool]] = [(root, False)]
        while stack:
            node, children_done = stack.pop()
            if id(node) in self.sizes:
                continue
            children = _children(node)
            if children_done:
                in_progress.discard(id(node))
                measured = [self.sizes[id(child)] for child in children]
                size = 1 + sum(child[0] for child in measured)
                depth = 1 + max((child[1] for child in measured), default=0)
                self.sizes[id(node)] = (min(size, MAX_NODES + 1), depth)
                continue
            if id(node) in in_progress:
                raise _Recursive(node)
            in_progress.add(id(node))
            stack.append((node, True))
            for child in children:
                if id(child) in in_progress:
                    raise _Recursive(child)
                stack.append((child, False))
        return self.sizes[id(root)]


def _children(node: yaml.Node) -> list[yaml.Node]:
    if isinstance(node, yaml.MappingNode):
        return [part for pair in node.value for part in pair]
    if isinstance(node, yaml.SequenceNode):
        return list(node.value)
    return []


def _largest_part(node: yaml.Node, sizes: dict[int, tuple[int, int]]
                  ) -> tuple[KeyPath, int | None]:
    """The key path (through mappings) to the part of the document that expands too far."""
    path: KeyPath = ()
    line = node.start_mark.line + 1 if node.start_mark is not None else None
    while isinstance(node, yaml.MappingNode):
        heavy = [(sizes[id(value)], key, value) for key, value in node.value
                 if sizes[id(value)][0] > MAX_NODES or sizes[id(value)][1] > MAX_DEPTH]
        if not heavy:
            break
        _, key, node = max(heavy, key=lambda item: item[0])
        path = (*path, str(key.value))
        line = key.start_mark.line + 1 if key.start_mark is not None else line
    return path, line


def check_expansion(node: yaml.Node, file: str) -> None:
    """Refuse aliases that expand past MAX_NODES values or MAX_DEPTH levels, or that refer
    to the node they are part of."""
    expansion = _Expansion()
    try:
        size, depth = expansion.measure(node)
    except _Recursive as recursive:
        mark = recursive.node.start_mark
        raise InputError(
            "an alias refers to the list or mapping that contains it", file=file,
            line=mark.line + 1 if mark is not None else None,
            fix="remove the alias (*name) inside its own anchor (&name)",
        ) from None
    if size > MAX_NODES or depth > MAX_DEPTH + 1:  # + 1: the scalars at the leaves
        path, line = _largest_part(node, expansion.sizes)
        raise InputError(
            f"expands to more than {MAX_NODES} values or {MAX_DEPTH} levels through its "
            "aliases (*name)", file=file, key=path, line=line,
            fix="write the values out, or use each alias fewer times",
        )
