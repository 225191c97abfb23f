"""A transaction cut short (a stop signal inside a read, a timeout, a garbled reply) must not
leave its late reply to be read as the answer to the next query: the next transaction starts
on a new session. The shutdown's read-back depends on it: 'OUTP?' answered with the level of an
earlier 'SOUR:CURR?' would misreport the output relay."""

from __future__ import annotations

from typing import Any

import pytest

from acquire.runtime.stop_signals import Interrupted
from drivers.rig import Rig
from drivers.roles import role_named

RIG = Rig.model_validate({"name": "resync", "instruments": {
    "source": {"role": "current_source", "resource": "TCPIP0::127.0.0.1::5025::SOCKET",
               "limits": {"current": "10 mA"}}}})
ANSWERS = {"SOUR:CURR?": "+1.000000000E-03", "OUTP?": "0", "SYST:ERR?": '0,"No error"'}


class Connection:
    """One session to an instrument that answers every query in order, as a real one does:
    an answer not read stays in the output queue of this session."""

    def __init__(self, cut_short: list[str]) -> None:
        self.queued: list[str] = []
        self.cut_short = cut_short  # queries whose read is interrupted once

    def write(self, message: str) -> None:
        if message.endswith("?"):
            self.queued.append(ANSWERS[message])

    def read(self) -> str:
        return self.queued.pop(0)

    def query(self, message: str) -> str:
        self.write(message)
        if message in self.cut_short:
            self.cut_short.remove(message)
            raise Interrupted("SIGTERM")  # the handler raises inside the read
        return self.read()

    def close(self) -> None:
        pass

    def set_visa_attribute(self, *args: Any) -> None:
        pass


class Manager:
    def __init__(self, cut_short: list[str]) -> None:
        self.cut_short = cut_short
        self.opened = 0

    def open_resource(self, resource: str, **options: Any) -> Connection:
        self.opened += 1
        return Connection(self.cut_short)


def test_the_reply_of_an_interrupted_query_is_not_read_as_the_next_answer() -> None:
    name, spec = RIG.one(role_named("current_source"))  # type: ignore[misc]
    manager = Manager(cut_short=["SOUR:CURR?"])
    source = role_named("current_source").driver(name, spec, manager)
    with pytest.raises(Interrupted):
        source.read_current()
    # The late '+1.0E-03' is still queued on the first session; the next query must not see it.
    assert source.output_is_on() is False
    assert manager.opened == 2
    assert source.read_current() == pytest.approx(1e-3)
    assert manager.opened == 2  # in step again: no further session


def test_a_query_that_answered_opens_no_new_session() -> None:
    name, spec = RIG.one(role_named("current_source"))  # type: ignore[misc]
    manager = Manager(cut_short=[])
    source = role_named("current_source").driver(name, spec, manager)
    for _ in range(3):
        assert source.output_is_on() is False
    assert manager.opened == 1
