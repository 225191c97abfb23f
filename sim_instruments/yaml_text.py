"""YAML output for generated files: terminations written as "\\n", not as folded blank lines."""

from __future__ import annotations

import yaml


class TerminationSafeDumper(yaml.SafeDumper):
    """A SafeDumper that double-quotes strings holding line breaks or tabs."""


def _represent_text(dumper: yaml.SafeDumper, text: str) -> yaml.ScalarNode:
    style = '"' if any(char in text for char in "\r\n\t") else None
    return dumper.represent_scalar("tag:yaml.org,2002:str", text, style=style)


TerminationSafeDumper.add_representer(str, _represent_text)
