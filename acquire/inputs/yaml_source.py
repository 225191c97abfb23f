"""Reading protocol and rig YAML: key paths with file and line, duplicate keys, `extends`.

Reading is bounded (acquire.inputs.yaml_bounds): regular files only, a size cap, a nesting
cap, a list-length cap and a cap on how far aliases expand. `extends:` stays inside the folder
of the file given on the command line (and its subfolders) unless that file says
`extends_anywhere: true`.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from acquire.errors import InputError, KeyPath
from acquire.inputs.yaml_bounds import (
    FAST_LOADER,
    check_expansion,
    check_shape,
    read_regular_file,
)

MAX_EXTENDS_DEPTH = 8
# Keys of the reader, not of the document: removed before the document is validated.
EXTENDS = "extends"
EXTENDS_ANYWHERE = "extends_anywhere"
READER_KEYS = (EXTENDS, EXTENDS_ANYWHERE)


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
    # resolved file name -> verbatim text, for run.json's hashes (the main file's text only
    # is stored there: a base file may hold anything, and stays where it is)
    texts: dict[str, str]
    main: str = ""  # the resolved name of the file given (the first key of `texts`' order)


def _walk(node: yaml.Node, path: KeyPath, file: str, locations: dict,
          walked: set[int] | None = None) -> None:
    # An alias is the node of its anchor again: its key is located, its content is not walked
    # again (errors inside it point at the alias's key), so aliases never multiply key paths.
    walked = set() if walked is None else walked
    if id(node) in walked:
        return
    walked.add(id(node))
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
            _walk(value_node, here, file, locations, walked)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            at: KeyPath = (*path, index)
            locations[at] = (file, item.start_mark.line + 1)
            _walk(item, at, file, locations, walked)


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
        except (yaml.YAMLError, InputError, RecursionError):
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
        check_shape(text, file)
        loader = FAST_LOADER(text)
        try:
            node = loader.get_single_node()
            if node is not None:
                check_expansion(node, file)
            data = loader.construct_document(node) if node is not None else None
        finally:
            loader.dispose()
    except yaml.YAMLError as fast_error:
        error = _python_parser_error(text) or fast_error
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
        # Never the value itself: the file may be any file at all, named by mistake.
        kinds = {type(None): "empty", list: "a list"}
        kind = kinds.get(type(data), "a single value")
        raise InputError(
            f"must be a mapping of keys to values, but it is {kind}", file=file, line=1,
            fix="start with keys like 'name:' at the left margin",
        )
    locations: dict[KeyPath, tuple[str, int]] = {}
    _walk(node, (), file, locations)
    return data, locations


def _python_parser_error(text: str) -> yaml.YAMLError | None:
    """The pure-Python parser's error for a document libyaml refused: its messages name the
    offending character, and its marks are the ones the error messages were written for."""
    try:
        yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError as error:
        return error
    except RecursionError:
        return None
    return None


def deep_merge(base: dict[str, Any], override: dict[str, Any]) -> dict[str, Any]:
    """Mappings merge key by key; any other value (lists included) replaces the base's."""
    merged = copy.deepcopy(base)
    for key, value in override.items():
        if isinstance(value, dict) and isinstance(merged.get(key), dict):
            merged[key] = deep_merge(merged[key], value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def _inside(folder: Path, resolved: Path) -> bool:
    try:
        resolved.relative_to(folder)
    except ValueError:
        return False
    return True


def _anywhere_allowed(data: dict[str, Any], locations: dict[KeyPath, tuple[str, int]]) -> bool:
    allowed = data.get(EXTENDS_ANYWHERE, False)
    if not isinstance(allowed, bool):
        file, line = locations[(EXTENDS_ANYWHERE,)]
        raise InputError("must be true or false", file=file, key=(EXTENDS_ANYWHERE,),
                         line=line, fix="write 'extends_anywhere: true' or remove it")
    return allowed


def load_document(path: Path, *, allow_extends: bool = True) -> LoadedDocument:
    """Load a YAML document, following `extends:` (relative to each file) and merging.

    Base files must lie in the folder of `path` or below it (symbolic links resolved), unless
    `path` itself says `extends_anywhere: true`; a base file cannot widen that.
    """
    chain: list[tuple[Path, dict[str, Any], dict[KeyPath, tuple[str, int]], str, Path]] = []
    current: Path = path
    referenced_from: tuple[str, int] | None = None
    tree = path.resolve().parent
    anywhere = False
    while True:
        resolved = current.resolve()
        if any(resolved == seen for seen, *_ in chain):
            raise InputError(
                "extends itself through a cycle", file=str(current), key=(EXTENDS,),
                fix="remove the circular 'extends'",
            )
        if referenced_from is not None and not anywhere and not _inside(tree, resolved):
            file, line = referenced_from
            raise InputError(
                f"extends {str(current)!r}, outside the folder {str(tree)!r} of the file given",
                file=file, key=(EXTENDS,), line=line,
                fix="copy the base file into that folder, or add 'extends_anywhere: true' "
                    "to the file given",
            )
        text = read_regular_file(current, referenced_from)
        data, locations = parse_yaml_text(text, str(current))
        if not chain:
            anywhere = _anywhere_allowed(data, locations)
        elif EXTENDS_ANYWHERE in data:
            file, line = locations[(EXTENDS_ANYWHERE,)]
            raise InputError(
                "only the file given on the command line may allow 'extends_anywhere'",
                file=file, key=(EXTENDS_ANYWHERE,), line=line, fix="move it to that file",
            )
        chain.append((resolved, data, locations, text, current))
        parent = data.get(EXTENDS)
        if parent is None or not allow_extends:
            break
        file, line = locations[(EXTENDS,)]
        if not isinstance(parent, str) or not parent.strip():
            raise InputError(
                "must be the path of a base file", file=file, key=(EXTENDS,), line=line,
                fix="write e.g. 'extends: base.yaml'",
            )
        if len(chain) > MAX_EXTENDS_DEPTH:
            raise InputError(
                f"more than {MAX_EXTENDS_DEPTH} levels of 'extends'", file=file,
                key=(EXTENDS,), line=line, fix="flatten the chain of base files",
            )
        referenced_from = (file, line)
        current = (current.parent / parent)

    merged: dict[str, Any] = {}
    source = SourceMap()
    texts: dict[str, str] = {}
    for resolved, data, locations, text, given in reversed(chain):
        merged = deep_merge(merged, {k: v for k, v in data.items() if k not in READER_KEYS})
        source.locations.update(
            {k: v for k, v in locations.items() if k[:1] not in ((EXTENDS,), (EXTENDS_ANYWHERE,))})
        source.files.append(given)
        texts[str(resolved)] = text
    # A list replaced by the child must not keep the base's per-item lines.
    for key_path in list(source.locations):
        if not _path_exists(merged, key_path):
            del source.locations[key_path]
    return LoadedDocument(merged, source, texts, main=str(chain[0][0]))


def _path_exists(data: Any, path: KeyPath) -> bool:
    for part in path:
        in_dict = isinstance(data, dict) and part in data
        in_list = isinstance(data, list) and isinstance(part, int) and part < len(data)
        if in_dict or in_list:
            data = data[part]
        else:
            return False
    return True
