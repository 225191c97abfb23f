"""docs/protocol.md: every key of a protocol file, from the protocol models of every mode."""

from __future__ import annotations

import dataclasses

from acquire.inputs import loops
from acquire.inputs.protocol import ProtocolBase
from acquire.modes import DEFAULT_MODE, all_modes
from acquire.reference import markdown
from acquire.reference.fields import KeyDoc, SectionDoc, section_docs

INTRO = """
A protocol is a YAML file: what to sweep on which sample, within which limits. `flipsweep check
PROTOCOL --rig RIG` validates it (exit 0, or exit 2 with one line naming the file, the key and
the fix); `flipsweep check --show` prints it merged and normalised (SI values, the unit in each
key's name), as run.json stores it.

- Every quantity carries its unit (`20 ms`, `1 mA`, `0.2 T`); a bare number is an error, never
  a guess. The tables below give each key's SI unit, in which flipsweep stores it. Fields may be
  written in T, mT, G, Oe, A/m or kA/m and are stored as mu0*H in tesla (300 Oe = 30 mT).
- `extends: base.yaml` (a path relative to the file) starts from another protocol and
  overrides its keys: mappings merge key by key, any other value (a list such as `loops`)
  replaces the base's. The base must lie in the folder of the file given on the command line
  (or below it) unless that file says `extends_anywhere: true`.
- A key the table does not list is an error (with a did-you-mean), so a typo cannot pass
  silently.
- A default written in a table is what the key means when it is left out; `required` keys
  must be given (by the file or the file it extends); `none` means unset.
"""


def _example(**spec: object) -> str:
    arguments: dict[str, object] = {"values": None, "step": None, "num": None,
                                    "spacing": "linear", "there_and_back": False, **spec}
    return ", ".join(f"{value:g}" for value in loops.expand(**arguments))  # type: ignore[arg-type]


def _off_grid_message() -> str:
    try:
        loops.expand(values=None, start=0.0, stop=1.0, step=0.3, num=None, spacing="linear",
                     there_and_back=False, show=lambda value: f"{value:g} T")
    except loops.LoopSpecError as error:
        return f"{error.problem} -- fix: {error.fix}"
    raise AssertionError("a stop of 1 T is off the grid of 0.3 T steps")


def _values_rules() -> str:
    tolerance = f"{loops.GRID_TOLERANCE:.1%}".replace(".0%", "%")
    return f"""## Loop values

A loop gives `values: [...]` (any order, repeats allowed), or `start` and `stop` with `step`
or `num`.

- **`step`**: the values are start, start + step, start + 2 step, ... and the last one is
  `stop`, which must lie on that grid: within {tolerance} of a step (so a step written to a few
  digits, `0.333333 T` for a third of 1 T, still reaches it), and the last value is then the
  stop as written. A stop the steps do not reach is an error naming the last value reached:
  `start: 0 T, stop: 1 T, step: 0.3 T` is refused with "{_off_grid_message()}".
- **`num`**: that many values from start to stop, both included, evenly spaced, or with
  `spacing: log` at a constant ratio (start and stop of one sign, neither zero). The values
  between the ends are rounded to {loops.SPACING_DIGITS} significant digits of the spacing to
  their nearer neighbour, which moves none by more than 0.5 % of a step; the ends stay as
  written. `start: 100 K, stop: 300 K, num: 6, spacing: log` gives
  {_example(start=100.0, stop=300.0, num=6, spacing="log")} K;
  `start: 0 T, stop: 1 T, num: 4` gives {_example(start=0.0, stop=1.0, num=4)} T.
- **`return: true`** appends the way back, passing the turning value once:
  `values: [1 mA, 2 mA, 3 mA], return: true` gives
  {_example(values=[1.0, 2.0, 3.0], start=None, stop=None, there_and_back=True)} mA.
- **`alternate_direction: true`** runs the loop backwards on every second pass of the loops
  outside it, so its axis never jumps back to the start between passes (a rotator turning
  0 -> 350 deg, then 350 -> 0 deg at the next field). It needs an outer loop.
- A loop has at most {loops.MAX_VALUES_PER_LOOP} values.
"""


def _mode_row() -> KeyDoc:
    names = [mode.name for mode in all_modes()]
    meanings = [f"`{mode.name}`: {mode.protocol_model.model_fields['mode'].description}"
                for mode in all_modes()]
    return KeyDoc("mode", "one of " + ", ".join(f"`{name}`" for name in names),
                  f"`{DEFAULT_MODE}`", "acquisition mode; " + "; ".join(meanings))


def _shared_sections() -> list[SectionDoc]:
    """The sections every mode shares, read from the default mode's model (the waits and the
    loops come from the roles, the same in every mode)."""
    model = next(mode for mode in all_modes() if mode.name == DEFAULT_MODE).protocol_model
    own = set(model.model_fields) - set(ProtocolBase.model_fields)
    sections = section_docs(model, "", skip=frozenset(own))
    top = sections[0]
    keys = tuple(_mode_row() if key.key == "mode" else key for key in top.keys)
    top = dataclasses.replace(top, keys=keys, summary="Keys every mode shares.")
    return [top, *sections[1:]]


def _mode_sections() -> list[str]:
    parts = []
    for mode in all_modes():
        model = mode.protocol_model
        base = set(ProtocolBase.model_fields)
        sections = section_docs(model, "", skip=frozenset(base))
        top = sections[0]
        summary = model.model_fields["mode"].description or ""
        parts.append(f"## `mode: {mode.name}`\n\n{summary}. Its own keys, beside the shared "
                     "ones:\n")
        parts.append(markdown.section(dataclasses.replace(top, summary=""), 3,
                                      f"Top-level keys of `{mode.name}`"))
        parts += [markdown.section(doc) for doc in sections[1:]]
    return parts


def protocol_page() -> str:
    shared = _shared_sections()
    body = [markdown.section(shared[0], 2, "Top-level keys"),
            *(markdown.section(doc) for doc in shared[1:]),
            *_mode_sections(),
            _values_rules()]
    return markdown.page(
        "Protocol file reference",
        "acquire/inputs/protocol.py, drivers/roles/, acquire/modes/",
        INTRO, body,
    )
