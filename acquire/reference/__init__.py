"""The reference pages of docs/ and the JSON Schemas, generated from the code so they cannot
drift: the protocol models, the role registry and dialects, and every mode's tables.

    flipsweep docs --out docs      writes docs/protocol.md, docs/rig.md, docs/output.md
    flipsweep docs --check docs    exit 1 naming each page that differs from the code

The hand-written pages of docs/ (conventions, the first night) link to these.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path


def _protocol() -> str:
    from acquire.reference.protocol_page import protocol_page

    return protocol_page()


def _rig() -> str:
    from acquire.reference.rig_page import rig_page

    return rig_page()


def _output() -> str:
    from acquire.reference.output_page import output_page

    return output_page()


GENERATED: dict[str, Callable[[], str]] = {
    "protocol.md": _protocol, "rig.md": _rig, "output.md": _output,
}


def write_docs(folder: Path) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, render in GENERATED.items():
        target = folder / name
        target.write_text(render(), encoding="utf-8")
        written.append(target)
    return written


def stale_docs(folder: Path) -> list[str]:
    """The generated pages in `folder` that are missing or differ from what the code makes."""
    stale = []
    for name, render in GENERATED.items():
        target = folder / name
        if not target.exists() or target.read_text(encoding="utf-8") != render():
            stale.append(name)
    return stale
