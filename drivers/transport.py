"""One instrument's VISA session, spoken in its dialect: send, ask, identity, error queue.

Every text sent comes from the instrument's dialect. Transport faults (VISA timeouts and I/O
errors, socket errors, garbled bytes) become CommunicationError, which the runner may retry;
what the instrument itself reports (its error queue, a rejection, a reply of the wrong form)
becomes InstrumentError naming the instrument, the command and the instrument's message.
"""

from __future__ import annotations

import contextlib
import socket
from collections import deque
from typing import Any

import pyvisa
from pyvisa import constants
from pyvisa.errors import InvalidSession, VisaIOError

from drivers.command_limits import CommandLimits
from drivers.dialect import ERROR_QUERY, Dialect
from drivers.errors import CommunicationError, InstrumentError, LimitError
from drivers.replies import ReplyFormatError
from drivers.spec import InstrumentSpec

# A queue longer than this is an instrument stuck repeating one error; stop reading it.
MAX_QUEUED_ERRORS = 32
# How many stale rejections (left by earlier unknown commands) to read past for one answer.
MAX_STALE_REJECTIONS = 4
_TRANSPORT_FAULTS = (VisaIOError, InvalidSession, OSError, UnicodeDecodeError)


def _describe_fault(error: BaseException, timeout_s: float) -> str:
    if isinstance(error, VisaIOError) and error.error_code == constants.StatusCode.error_timeout:
        return f"no reply within the {timeout_s:g} s timeout"
    return f"{type(error).__name__}: {error}"


class Transport:
    def __init__(
        self, name: str, spec: InstrumentSpec, resource_manager: pyvisa.ResourceManager,
        dialect: Dialect, limits: CommandLimits | None = None,
    ) -> None:
        self.name = name
        self.spec = spec
        self.dialect = dialect
        self.limits = limits or CommandLimits((), spec)
        self._manager = resource_manager
        self._session: Any = None
        # Commands sent since the error queue was last read: the queue does not say which
        # command an entry belongs to, so an error names all of them.
        self._unchecked: deque[str] = deque(maxlen=8)
        # True from the start of a transaction until its reply is in: a transaction cut short
        # (a timeout, a stop signal, a garbled reply) may leave its reply on the way, and the
        # next query would read it as its own answer. The next transaction opens a new session.
        self._out_of_step = False
        self.open()

    # -- session ---------------------------------------------------------------------
    def open(self) -> None:
        try:
            self._session = self._manager.open_resource(
                self.spec.resource,
                read_termination=self.spec.read_termination,
                write_termination=self.spec.write_termination,
                timeout=round(self.spec.timeout * 1000),
            )
        except _TRANSPORT_FAULTS as error:
            self._session = None
            raise CommunicationError(
                self.name, f"open {self.spec.resource}", _describe_fault(error, self.spec.timeout)
            ) from error
        self._send_small_messages_at_once()

    def _send_small_messages_at_once(self) -> None:
        """Raw LAN sockets: switch Nagle's algorithm off.

        With it on, a short command waits for the previous one's acknowledgement (~40 ms of
        delayed ACK), so a source could still be changing its current while another instrument
        already reads: the reading would silently belong to the wrong polarity.
        """
        if not self.spec.resource.upper().endswith("::SOCKET"):
            return
        try:
            self._session.set_visa_attribute(
                constants.ResourceAttribute.tcpip_nodelay, constants.VI_TRUE
            )
            return
        except Exception:  # backends differ; fall back to the socket itself
            pass
        # pyvisa-py does not take the attribute for raw sockets but exposes the socket.
        library_session = getattr(self._session.visalib, "sessions", {}).get(
            self._session.session
        )
        raw_socket = getattr(library_session, "interface", None)
        if isinstance(raw_socket, socket.socket):
            with contextlib.suppress(OSError):
                raw_socket.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)

    def close(self) -> None:
        session, self._session = self._session, None
        if session is not None:
            with contextlib.suppress(*_TRANSPORT_FAULTS):  # the session is gone either way
                session.close()

    def reconnect(self) -> None:
        self.close()
        self.open()
        self._out_of_step = False

    def _live_session(self, command: str) -> Any:
        if self._session is None:
            raise CommunicationError(self.name, command, "the session is closed")
        if self._out_of_step:
            # A reply of an earlier, cut-short transaction may still arrive: a new session
            # cannot receive it.
            self.reconnect()
        return self._session

    def _transaction(self, command: str, call: Any) -> Any:
        session = self._live_session(command)
        self._out_of_step = True  # stays so if anything, a stop signal included, cuts it short
        try:
            result = call(session)
        except _TRANSPORT_FAULTS as error:
            raise CommunicationError(
                self.name, command, _describe_fault(error, self.spec.timeout)
            ) from error
        self._out_of_step = False
        return result

    def write_text(self, command: str) -> None:
        self._transaction(command, lambda session: session.write(command))
        self._unchecked.append(command)

    def read_text(self, command: str) -> str:
        return str(self._transaction(command, lambda session: session.read()))

    def query_text(self, command: str) -> str:
        reply = str(self._transaction(command, lambda session: session.query(command)))
        self._unchecked.append(command)
        return reply

    # -- dialect -----------------------------------------------------------------------
    def _command(self, template: str, value: float | None = None) -> str:
        if not self.dialect.commands.get(template):
            raise InstrumentError(
                self.name, template, f"the rig's dialect has no command for {template!r}"
            )
        return self.dialect.render(template, value)

    def send(self, template: str, value: float | None = None) -> None:
        """Render `template`, check its number against the limits, then write it."""
        bound = self.limits.get(template)
        if bound is None or value is None or not self.dialect.takes_value(template):
            self.write_text(self._command(template, value))
            return
        if not self.dialect.commands.get(template):
            raise InstrumentError(
                self.name, template, f"the rig's dialect has no command for {template!r}"
            )
        try:
            command = (self.dialect.render_not_above(template, value)
                       if bound.limit.round_toward_zero else self.dialect.render(template, value))
            sent = self.dialect.decode(template, command)
        except ValueError as error:
            raise LimitError(self.name, template, f"refused: {error}") from None
        self.limits.refuse_past(self.name, template, value, sent, command)
        self.write_text(command)

    def ask(self, template: str) -> object:
        command = self._command(template)
        reply = self.query_text(command)
        if self._is_rejection(reply):
            raise self._rejected(command)
        try:
            return self.dialect.parsers[template].parse(reply)
        except ReplyFormatError as error:
            # Most often the reply of an earlier query read late: start the next one afresh.
            self._out_of_step = True
            raise InstrumentError(self.name, command, f"unexpected reply: {error}") from None

    def ask_number(self, template: str) -> float:
        value = self.ask(template)
        if isinstance(value, bool) or not isinstance(value, float):
            raise InstrumentError(
                self.name, self.dialect.render(template),
                f"the reply spec of {template!r} gives {value!r}, not a number",
            )
        return value

    def ask_flag(self, template: str) -> bool:
        value = self.ask(template)
        if isinstance(value, bool):
            return value
        if isinstance(value, float):
            return value != 0.0
        raise InstrumentError(
            self.name, self.dialect.render(template),
            f"the reply spec of {template!r} gives {value!r}, not yes/no",
        )

    def _is_rejection(self, reply: str) -> bool:
        return bool(self.dialect.rejected) and reply.strip() == self.dialect.rejected

    def _rejected(self, command: str) -> InstrumentError:
        found = self.errors()
        return InstrumentError(self.name, command, "; ".join(found) or "rejected the command")

    # -- IEEE 488.2 common commands and the SCPI error queue -----------------------------
    def identify(self) -> str:
        if not self.dialect.supports("identify"):
            return ""
        return str(self.ask("identify"))

    def reset(self) -> None:
        for template in ("reset", "clear_status"):
            if self.dialect.supports(template):
                self.send(template)
        if self.dialect.supports("operation_complete"):
            # *OPC? answers once the reset has finished, so the next command meets a ready
            # instrument.
            self.ask("operation_complete")

    def errors(self) -> list[str]:
        """Drain the error queue: each entry as the instrument wrote it; [] when empty.

        An instrument that rejects the error query itself leaves this waiting for an answer
        that never comes (CommunicationError after the timeout): blank its error_query.
        """
        if not self.dialect.supports(ERROR_QUERY):
            self._unchecked.clear()
            return []
        command = self.dialect.render(ERROR_QUERY)
        parser = self.dialect.parsers[ERROR_QUERY]
        found: list[str] = []
        for _ in range(MAX_QUEUED_ERRORS):
            reply = self.query_text(command)
            for _ in range(MAX_STALE_REJECTIONS):
                if not self._is_rejection(reply):
                    break
                # An earlier unknown command left its rejection in the output queue; the
                # answer to this query comes after it.
                reply = self.read_text(command)
            try:
                parsed = parser.parse(reply)
            except ReplyFormatError as error:
                raise InstrumentError(self.name, command, f"unexpected reply: {error}") from None
            assert isinstance(parsed, tuple), "the error query's reply spec is scpi_error"
            code, message = parsed
            # SCPI-99 vol. 1: code 0 ("0,\"No error\"") means the queue is empty.
            if code == 0:
                break
            found.append(f'{code},"{message}"')
        self._unchecked.clear()
        return found

    def check_errors(self) -> None:
        """Raise InstrumentError if the queue holds anything since the last check."""
        sent = list(self._unchecked)
        found = self.errors()
        if found:
            raise InstrumentError(self.name, "; ".join(sent) or "(no command)", "; ".join(found))
