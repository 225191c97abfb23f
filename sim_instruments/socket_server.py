"""A simulated rig served as raw SCPI over TCP on the loopback interface, one port per instrument.

Each instrument of the rig becomes a LAN-style instrument at `TCPIP0::127.0.0.1::<port>::SOCKET`
that any VISA library (pyvisa-py, "@py") can talk to. Behind the sockets sit the same pyvisa-sim
devices and the same SimulatedWorld as `flipsweep run --simulate` (so every instrument speaks its
dialect, the rig's overrides included), on a real clock. Transport faults can be injected
(sim_instruments.faults) to rehearse what a night on a flaky network does to a run.

One thread serves every socket with a selector, which keeps the simulated world in the order the
client acted on it: a client that waits for a query's reply has sent everything else before that
query, so whatever has arrived on other connections is carried out before the query is answered.
(One thread per connection would let a voltmeter read before the current source had applied the
current set just before.) Replies to be sent later (--delay, late-reply faults) wait in a queue,
so a slow reply never holds up another instrument.

Only the loopback address is ever bound, at most MAX_CONNECTIONS_PER_INSTRUMENT connections per
instrument are kept, and the loop wakes at least every POLL_S, so `stop()` ends it promptly.
"""

from __future__ import annotations

import contextlib
import copy
import heapq
import itertools
import logging
import selectors
import socket
import threading
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import TracebackType
from typing import Any

import yaml
from pyvisa.rname import to_canonical_name

from drivers.errors import InputError
from drivers.rig import Rig
from drivers.spec import InstrumentSpec
from sim_instruments.faults import Fault, FaultInjector, FaultPlan
from sim_instruments.simulated_rig import open_simulated_rig
from sim_instruments.world import Clock, Sample, SimulatedWorld
from sim_instruments.yaml_text import TerminationSafeDumper

log = logging.getLogger(__name__)

LOOPBACK = "127.0.0.1"
# A LAN instrument accepts a handful of sessions; a client that reconnects after a fault may
# hold the old connection and the new one for a moment.
MAX_CONNECTIONS_PER_INSTRUMENT = 8
LISTEN_BACKLOG = MAX_CONNECTIONS_PER_INSTRUMENT
# SCPI messages are short; a longer line without a termination is a client speaking another
# protocol (or a wrong termination), and the connection is closed rather than buffered forever.
MAX_MESSAGE_BYTES = 64 * 1024
MAX_REPLY_BYTES = 64 * 1024
RECEIVE_BYTES = 4096
POLL_S = 0.1  # longest the serving loop sleeps before it checks whether to stop
# A late reply arrives this long after the client's timeout, so the client has surely given up.
LATE_BEYOND_TIMEOUT_S = 0.5


def socket_resource(port: int) -> str:
    return f"TCPIP0::{LOOPBACK}::{port}::SOCKET"


@dataclass
class ServedInstrument:
    name: str
    spec: InstrumentSpec
    device: Any  # the pyvisa-sim Device: write(bytes) a message, then read() its reply bytewise
    query_termination: bytes  # what ends a message from the client
    reply_termination: bytes
    port: int = 0
    connections: int = 0  # open now
    accepted: int = 0  # since start: 1 + the client's reconnects, for a client that stays

    @property
    def late_s(self) -> float:
        return self.spec.timeout + LATE_BEYOND_TIMEOUT_S


@dataclass(eq=False)
class _Connection:
    sock: socket.socket
    instrument: ServedInstrument
    pending: bytearray = field(default_factory=bytearray)
    closed: bool = False


@dataclass(order=True)
class _LaterReply:
    due: float
    sequence: int
    connection: _Connection = field(compare=False)
    data: bytes = field(compare=False)


def _looks_like_query(message: bytes) -> bool:
    # SCPI and IEEE 488.2 mark every query with '?' (common practice).
    return b"?" in message




def _drain(device: Any) -> bytes:
    reply = bytearray()
    for _ in range(MAX_REPLY_BYTES):
        byte, _end = device.read()
        if not byte:
            break
        reply += byte
    return bytes(reply)


class SocketRig:
    """A simulated rig behind loopback TCP sockets; usable in-process (tests) or by `serve`.

        with SocketRig(rig, sample, clock, rig_data=data,
                       faults=FaultPlan(drop_rate=0.01)) as served:
            served.resources            # {"vxx": "TCPIP0::127.0.0.1::40123::SOCKET", ...}
            served.write_rig(tmp / "served.yaml")
            served.world.instruments["source"]  # the simulated source, as the run left it

    `port_base` 0 takes free ports; otherwise instrument i (in rig order) gets port_base + i.
    """

    def __init__(
        self, rig: Rig, sample: Sample, clock: Clock, *, rig_data: Mapping[str, Any],
        rig_label: str = "rig", port_base: int = 0, faults: FaultPlan | None = None,
    ) -> None:
        """`rig_data`: the rig file as written (after `extends`), for `write_rig`; `clock`: a
        real clock (the served instruments answer in real time)."""
        self.rig = rig
        self.rig_data = rig_data
        self.rig_label = rig_label
        instruments = rig.instruments
        if not 0 <= port_base <= 65536 - len(instruments):
            raise InputError(f"{port_base} is not a TCP port for {len(instruments)} instruments",
                             key=("--port-base",),
                             fix=f"use 0 (free ports) or 1024..{65536 - len(instruments)}")
        self.plan = faults or FaultPlan()
        problems = self.plan.problems(instruments)
        if problems:
            option, problem = problems[0]
            raise InputError(problem, key=(option,), fix="see `flipsweep serve --help`")
        self.port_base = port_base
        self.clock = clock
        self.simulation = open_simulated_rig(rig, sample, clock)
        self.world: SimulatedWorld = self.simulation.world
        self.faults = FaultInjector(self.plan, instruments)
        devices = self.simulation.resource_manager.visalib.devices  # type: ignore[attr-defined]
        self.instruments = {
            name: ServedInstrument(
                name, spec, devices[to_canonical_name(self._simulated_resource(name))],
                spec.write_termination.encode() or b"\n", spec.read_termination.encode(),
            )
            for name, spec in instruments.items()
        }
        self.resources: dict[str, str] = {}
        self._listeners: list[socket.socket] = []
        self._connections: set[_Connection] = set()
        self._later: list[_LaterReply] = []
        self._sequence = itertools.count()
        self._selector: selectors.BaseSelector | None = None
        self._thread: threading.Thread | None = None
        self._stopping = threading.Event()

    def _simulated_resource(self, name: str) -> str:
        return (self.simulation.rig or self.rig).instruments[name].resource

    # -- lifetime ---------------------------------------------------------------------------
    def start(self) -> dict[str, str]:
        """Listen on every instrument's port; instrument name -> VISA resource string."""
        if self._thread is not None:
            return dict(self.resources)
        self._stopping.clear()
        self._selector = selectors.DefaultSelector()
        try:
            for index, (name, instrument) in enumerate(self.instruments.items()):
                listener = self._listen(name, self.port_base + index if self.port_base else 0)
                self._listeners.append(listener)
                self._selector.register(listener, selectors.EVENT_READ, instrument)
                instrument.port = listener.getsockname()[1]
                self.resources[name] = socket_resource(instrument.port)
        except BaseException:
            self._close_sockets()
            raise
        self._thread = threading.Thread(target=self._serve, name="socket rig", daemon=True)
        self._thread.start()
        return dict(self.resources)

    def _listen(self, name: str, port: int) -> socket.socket:
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        try:
            # A restarted server takes its ports back at once (no wait for TIME_WAIT).
            listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
            listener.bind((LOOPBACK, port))
            listener.listen(LISTEN_BACKLOG)
            listener.setblocking(False)
        except OSError as error:
            listener.close()
            raise InputError(
                f"cannot listen on {LOOPBACK}:{port} for {name}: {error.strerror}",
                key=("--port-base",), fix="choose another --port-base, or 0 for free ports",
            ) from None
        return listener

    def stop(self) -> None:
        """Stop listening and close every connection (the loop notices within POLL_S)."""
        self._stopping.set()
        if self._thread is not None:
            self._thread.join()
            self._thread = None
        self._close_sockets()

    def close(self) -> None:
        self.stop()
        self.simulation.close()

    def __enter__(self) -> SocketRig:
        self.start()
        return self

    def __exit__(
        self, kind: type[BaseException] | None, error: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self.close()

    def _close_sockets(self) -> None:
        for connection in list(self._connections):
            self._drop(connection)
        for listener in self._listeners:
            listener.close()
        self._listeners = []
        self._later = []
        if self._selector is not None:
            self._selector.close()
            self._selector = None

    # -- faults from outside (tests, an interactive session) ----------------------------------
    def stall(self, name: str, after: int = 0) -> None:
        self.faults.stall(name, after)

    def answer_again(self, name: str) -> None:
        self.faults.answer_again(name)

    # -- the rig file a client uses -----------------------------------------------------------
    def rig_document(self) -> dict[str, Any]:
        """The input rig (after `extends`), with '@py' and the served addresses."""
        if not self.resources:
            raise RuntimeError("start() the served rig first: its ports are not known yet")
        document = copy.deepcopy(dict(self.rig_data))
        document["visa_library"] = "@py"
        for name, resource in self.resources.items():
            document["instruments"][name]["resource"] = resource
        return document

    def write_rig(self, path: Path) -> Path:
        header = (f"# {self.rig_label} served on {LOOPBACK} by `flipsweep serve`; "
                  "valid while that server runs.\n")
        body = yaml.dump(self.rig_document(), Dumper=TerminationSafeDumper, sort_keys=False,
                         default_flow_style=False, allow_unicode=True, width=100)
        path.write_text(header + body, encoding="utf-8")
        return path

    # -- the serving loop -----------------------------------------------------------------------
    def _serve(self) -> None:
        selector = self._selector
        assert selector is not None
        while not self._stopping.is_set():
            wait = POLL_S
            if self._later:
                wait = min(wait, max(0.0, self._later[0].due - time.monotonic()))
            arrived: list[tuple[_Connection, bytes]] = []
            for key, _events in selector.select(wait):
                if isinstance(key.data, ServedInstrument):
                    self._accept(key.fileobj, key.data)  # type: ignore[arg-type]
                else:
                    arrived.extend(self._receive(key.data))
            # Commands that arrived together with a query go first (a stable sort, so messages
            # keep their order otherwise). Only a client that pipelines a command behind a query
            # on one connection would see the two swapped; VISA clients wait for each reply.
            for connection, message in sorted(arrived, key=lambda item: _looks_like_query(item[1])):
                if not connection.closed:
                    self._answer(connection, message)
            self._send_due()

    def _accept(self, listener: socket.socket, instrument: ServedInstrument) -> None:
        try:
            sock, _address = listener.accept()
        except OSError:
            return
        if instrument.connections >= MAX_CONNECTIONS_PER_INSTRUMENT:
            log.warning("%s: already %d connections; refused one", instrument.name,
                        instrument.connections)
            sock.close()
            return
        sock.setblocking(False)
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        connection = _Connection(sock, instrument)
        instrument.connections += 1
        instrument.accepted += 1
        self._connections.add(connection)
        assert self._selector is not None
        self._selector.register(sock, selectors.EVENT_READ, connection)

    def _receive(self, connection: _Connection) -> list[tuple[_Connection, bytes]]:
        """Every complete message that has arrived on `connection`."""
        for _ in range(MAX_MESSAGE_BYTES // RECEIVE_BYTES + 1):
            try:
                chunk = connection.sock.recv(RECEIVE_BYTES)
            except BlockingIOError:
                break
            except OSError:
                chunk = b""
            if not chunk:
                self._drop(connection)  # the client closed the connection
                return []
            connection.pending += chunk
        termination = connection.instrument.query_termination
        messages = []
        while (end := connection.pending.find(termination)) >= 0:
            messages.append((connection, bytes(connection.pending[:end])))
            del connection.pending[: end + len(termination)]
        if len(connection.pending) > MAX_MESSAGE_BYTES:
            log.warning("%s: %d bytes without a termination; closing the connection",
                        connection.instrument.name, len(connection.pending))
            self._drop(connection)
            return []
        return messages

    def _answer(self, connection: _Connection, message: bytes) -> None:
        instrument = connection.instrument
        name = instrument.name
        transaction, stalled = self.faults.next_transaction(name)
        if stalled:
            return  # hung: it still reads, so the client's writes go through, but never acts
        try:
            instrument.device.write(message + instrument.query_termination)
            reply = _drain(instrument.device)
        except Exception:  # the one serving thread must outlive a simulation error
            log.exception("%s: simulating %r failed; closing the connection", name, message)
            self._drop(connection)
            return
        if not reply:
            return  # a command: SCPI instruments do not answer commands
        fault = self.faults.fault_for_reply(name, transaction)
        if fault is not Fault.NONE:
            log.info("%s: transaction %d (%r): injected %s", name, transaction,
                     message.decode(errors="replace"), fault.value)
        if fault is Fault.DROP:
            self._drop(connection)
            return
        if fault is Fault.GARBLE:
            reply = self.faults.garbled(name, reply, instrument.reply_termination)
        delay = self.plan.delay_s + (instrument.late_s if fault is Fault.LATE else 0.0)
        if delay > 0.0:
            later = _LaterReply(time.monotonic() + delay, next(self._sequence), connection, reply)
            heapq.heappush(self._later, later)
            return
        self._send(connection, reply)

    def _send_due(self) -> None:
        now = time.monotonic()
        while self._later and self._later[0].due <= now:
            later = heapq.heappop(self._later)
            if not later.connection.closed:
                self._send(later.connection, later.data)

    def _send(self, connection: _Connection, reply: bytes) -> None:
        try:
            # A reply is far smaller than a socket buffer; one that does not fit means the
            # client stopped reading, and the connection is given up.
            sent = connection.sock.send(reply)
        except OSError:
            sent = -1
        if sent != len(reply):
            self._drop(connection)

    def _drop(self, connection: _Connection) -> None:
        if connection.closed:
            return
        connection.closed = True
        connection.instrument.connections -= 1
        self._connections.discard(connection)
        if self._selector is not None:
            with contextlib.suppress(KeyError, ValueError):
                self._selector.unregister(connection.sock)
        connection.sock.close()
