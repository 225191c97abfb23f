"""Reading protocol and rig YAML: key paths with file and line, duplicate keys, `extends`."""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from acquire.errors import InputError, KeyPath

MAX_EXTENDS_DEPTH = 8


@dataclass
class SourceMap:
    """Where each key path of a merged document was written: (file, line)."""

    locations: dict[KeyPath, tuple[str, int]] = field(default_factory=dict)
    files: list[Path] = field(default_factory=list)

    def where(self, path: KeyPath) -> tuple[str | None, int | None]:
        # The nearest written ancestor: pydantic may name a key the user never wrote.
        for end in range(len(path), -1, -1):
            found = self.locations.get(tuple(path[:end]))
            if found:
                return found
        return (str(self.files[-1]) if self.files else None), None

    def error(self, problem: str, path: KeyPath, fix: str = "") -> InputError:
        file, line = self.where(path)
        return InputError(problem, file=file, key=path, line=line, fix=fix)


@dataclass
class LoadedDocument:
    data: dict[str, Any]
    source: SourceMap
    texts: dict[str, str]  # file name -> verbatim text, for run.json


def _walk(node: yaml.Node, path: KeyPath, file: str, locations: dict) -> None:
    if isinstance(node, yaml.MappingNode):
        seen: dict[str, int] = {}
        for key_node, value_node in node.value:
            key = str(key_node.value)
            line = key_node.start_mark.line + 1
            if key in seen:
                raise InputError(
                    f"key {key!r} is written twice (also on line {seen[key]})",
                    file=file, key=(*path, key), line=line,
                    fix="keep one of them",
                )
            seen[key] = line
            here: KeyPath = (*path, key)
            locations[here] = (file, line)
            _walk(value_node, here, file, locations)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            at: KeyPath = (*path, index)
            locations[at] = (file, item.start_mark.line + 1)
            _walk(item, at, file, locations)


def _key_path_near(text: str, line: int) -> KeyPath:
    """The first key written on `line`, else the last one before it; () if none can be read.

    For errors YAML itself cannot place on a key (tabs, syntax): the text is read with tabs
    as spaces, then with ever fewer lines before `line`, until it parses.
    """
    rows = text.replace("\t", "  ").splitlines()
    for end in (len(rows), *range(line - 1, 0, -1)):
        try:
            node = yaml.compose("\n".join(rows[:end]), Loader=yaml.SafeLoader)
            locations: dict[KeyPath, tuple[str, int]] = {}
            if node is not None:
                _walk(node, (), "", locations)
        except (yaml.YAMLError, InputError):
            continue
        written = [(row, -len(path), path) for path, (_, row) in locations.items() if row <= line]
        return max(written)[2] if written else ()
    return ()


def parse_yaml_text(text: str, file: str) -> tuple[dict[str, Any], dict[KeyPath, tuple[str, int]]]:
    if "\t" in text:
        line = next(n for n, row in enumerate(text.splitlines(), 1) if "\t" in row)
        raise InputError(
            "contains a tab character; YAML indents with spaces only",
            file=file,
            key=_key_path_near(text, line),
            line=line,
            fix="replace tabs with spaces",
        )
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.YAMLError as error:
        mark = getattr(error, "problem_mark", None)
        at_line: int | None = mark.line + 1 if mark is not None else None
        problem = getattr(error, "problem", None) or str(error).splitlines()[0]
        raise InputError(
            f"is not valid YAML ({problem})",
            file=file,
            line=at_line,
            key=_key_path_near(text, at_line) if at_line is not None else (),
            fix="check indentation, colons, brackets and quotes on that line and the one before",
        ) from None
    if not isinstance(data, dict) or node is None:
        kinds = {type(None): "empty", list: "a list"}
        kind = kinds.get(type(data), f"a single value ({str(data)[:40]!r})")
        raise InputError(
            f"must be a mapping of keys to values, but it is {kind}", file=file, line=1,
            fix="start with keys like 'name:' at the left margin",
        )
    locations: dict[KeyPath, tuple[str, int]] = {}
    _walk(node, (), file, locations)
    return data, locations


def deep_merge(base: dict[str, Any], override: dict[str, Any]) -> dict[str, Any]:
    """Mappings merge key by key; any other value (lists included) replaces the base's."""
    merged = copy.deepcopy(base)
    for key, value in override.items():
        if isinstance(value, dict) and isinstance(merged.get(key), dict):
            merged[key] = deep_merge(merged[key], value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def _read_text(path: Path, referenced_from: tuple[str, int] | None) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        if referenced_from:
            file, line = referenced_from
            raise InputError(
                f"extends {str(path)!r}, which does not exist", file=file, key=("extends",),
                line=line, fix="give a path relative to this file",
            ) from None
        raise InputError("file not found", file=str(path), fix="check the path") from None
    except UnicodeDecodeError:
        raise InputError(
            "is not UTF-8 text", file=str(path), fix="save the file as UTF-8"
        ) from None
    except OSError as error:
        raise InputError(f"cannot be read ({error.strerror})", file=str(path)) from None


def load_document(path: Path, *, allow_extends: bool = True) -> LoadedDocument:
    """Load a YAML document, following `extends:` (relative to each file) and merging."""
    chain: list[tuple[Path, dict[str, Any], dict[KeyPath, tuple[str, int]], str, Path]] = []
    current: Path = path
    referenced_from: tuple[str, int] | None = None
    while True:
        resolved = current.resolve()
        if any(resolved == seen for seen, *_ in chain):
            raise InputError(
                "extends itself through a cycle", file=str(current), key=("extends",),
                fix="remove the circular 'extends'",
            )
        text = _read_text(current, referenced_from)
        data, locations = parse_yaml_text(text, str(current))
        chain.append((resolved, data, locations, text, current))
        parent = data.get("extends")
        if parent is None or not allow_extends:
            break
        file, line = locations[("extends",)]
        if not isinstance(parent, str) or not parent.strip():
            raise InputError(
                "must be the path of a base file", file=file, key=("extends",), line=line,
                fix="write e.g. 'extends: base.yaml'",
            )
        if len(chain) > MAX_EXTENDS_DEPTH:
            raise InputError(
                f"more than {MAX_EXTENDS_DEPTH} levels of 'extends'", file=file,
                key=("extends",), line=line, fix="flatten the chain of base files",
            )
        referenced_from = (file, line)
        current = (current.parent / parent)

    merged: dict[str, Any] = {}
    source = SourceMap()
    texts: dict[str, str] = {}
    for resolved, data, locations, text, given in reversed(chain):
        merged = deep_merge(merged, {k: v for k, v in data.items() if k != "extends"})
        source.locations.update({k: v for k, v in locations.items() if k[:1] != ("extends",)})
        source.files.append(given)
        texts[str(resolved)] = text
    # A list replaced by the child must not keep the base's per-item lines.
    for key_path in list(source.locations):
        if not _path_exists(merged, key_path):
            del source.locations[key_path]
    return LoadedDocument(merged, source, texts)


def _path_exists(data: Any, path: KeyPath) -> bool:
    for part in path:
        in_dict = isinstance(data, dict) and part in data
        in_list = isinstance(data, list) and isinstance(part, int) and part < len(data)
        if in_dict or in_list:
            data = data[part]
        else:
            return False
    return True
