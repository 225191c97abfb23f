"""Transport faults a served simulated instrument can inject, drawn from a seeded generator.

A transaction is one message an instrument receives. Faults that concern a reply (a dropped
connection instead of the reply, line noise instead of the reply, a reply after the client's
timeout) are drawn only for messages that have a reply: a command (no reply) is always carried
out, so an injected fault never silently loses a setting -- every fault reaches the client as a
timeout, an I/O error or an unreadable reply, which is what the runner is meant to survive.
A stalled instrument is different: it keeps accepting connections and reading bytes, but from
its stall point on it neither acts on a message nor answers one (hung firmware).

Each instrument draws from its own generator, seeded from the fault seed and its name, so a
run that sends the same transactions meets the same faults whatever the thread timing.
"""

from __future__ import annotations

import enum
import math
import random
import threading
from collections import Counter, deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

# Printable ASCII that no number, flag word, error entry or rejection reply is made of, and
# no termination character: a garbled reply stays one line and never parses as a value.
LINE_NOISE = b"#$%&*<>@[]^_`{|}~"
MIN_GARBLE_BYTES = 3
# Enough to see what happened in a long session without growing without bound.
MAX_RECORDED_EVENTS = 10_000


class Fault(enum.Enum):
    NONE = "none"
    DROP = "drop"  # the connection is closed instead of replying
    GARBLE = "garble"  # line noise instead of the reply
    LATE = "late"  # the reply comes only after the client's timeout
    STALL = "stall"  # the instrument neither acts nor answers any more


@dataclass(frozen=True)
class FaultPlan:
    """What to inject. Rates are probabilities per reply; they must add up to at most 1."""

    delay_s: float = 0.0  # added to every reply
    drop_rate: float = 0.0
    garble_rate: float = 0.0
    late_rate: float = 0.0
    # instrument name -> transactions it still handles before it stalls (0: stalled at once)
    stall_after: Mapping[str, int] = field(default_factory=dict)
    seed: int = 0
    # instrument name -> {transaction number: fault}: a fault at a chosen reply (tests), on
    # top of the random ones
    scripted: Mapping[str, Mapping[int, Fault]] = field(default_factory=dict)

    @classmethod
    def from_rates(
        cls, *, fault_rate: float = 0.0, drop_rate: float = 0.0, garble_rate: float = 0.0,
        delay_s: float = 0.0, stall_after: Mapping[str, int] | None = None, seed: int = 0,
    ) -> FaultPlan:
        """`fault_rate` is shared equally by the three kinds, on top of the specific rates."""
        share = fault_rate / 3.0
        return cls(delay_s=delay_s, drop_rate=drop_rate + share,
                   garble_rate=garble_rate + share, late_rate=share,
                   stall_after=dict(stall_after or {}), seed=seed)

    def problems(self, instruments: Iterable[str]) -> list[tuple[str, str]]:
        """(option, what is wrong) for every setting that cannot be served."""
        found: list[tuple[str, str]] = []
        if not (math.isfinite(self.delay_s) and self.delay_s >= 0.0):
            found.append(("--delay", f"must be >= 0 s, got {self.delay_s!r}"))
        for option, rate in (("--drop-rate", self.drop_rate), ("--garble-rate", self.garble_rate),
                             ("--fault-rate", self.late_rate)):
            if not (math.isfinite(rate) and 0.0 <= rate <= 1.0):
                found.append((option, f"must be a fraction between 0 and 1, got {rate!r}"))
        total = self.drop_rate + self.garble_rate + self.late_rate
        if math.isfinite(total) and total > 1.0 + 1e-12:
            found.append(("--fault-rate", f"the fault rates add up to {total:g} > 1"))
        known = set(instruments)
        for name, after in self.stall_after.items():
            if name not in known:
                found.append(("--stall", f"{name!r} is not an instrument of the rig "
                                         f"(it has {', '.join(sorted(known))})"))
            if after < 0:
                found.append(("--stall", f"{name}@{after}: the count must be >= 0"))
        return found

    @property
    def injects(self) -> bool:
        return bool(self.drop_rate or self.garble_rate or self.late_rate or self.stall_after
                    or self.scripted)


def parse_stall(text: str) -> tuple[str, int]:
    """'vxx@200' -> ('vxx', 200): vxx stops answering after 200 transactions; 'vxx' -> 0."""
    name, at, count = text.partition("@")
    if not name:
        raise ValueError(f"{text!r}: write NAME or NAME@N")
    if not at:
        return name, 0
    try:
        return name, int(count)
    except ValueError:
        raise ValueError(f"{text!r}: N in NAME@N must be a whole number") from None


def garble(reply: bytes, termination: bytes, rng: random.Random) -> bytes:
    """Line noise as long as the reply's text, still ending in the reply termination."""
    body = reply[: -len(termination)] if termination and reply.endswith(termination) else reply
    length = max(MIN_GARBLE_BYTES, len(body))
    return bytes(rng.choice(LINE_NOISE) for _ in range(length)) + termination


@dataclass(frozen=True)
class FaultEvent:
    instrument: str
    transaction: int  # 1 for the instrument's first message
    fault: Fault


class FaultInjector:
    """Thread-safe: one server thread per connection asks it about every message."""

    def __init__(self, plan: FaultPlan, instruments: Iterable[str]) -> None:
        self.plan = plan
        names = list(instruments)
        self._generators = {name: random.Random(f"{plan.seed}:{name}") for name in names}
        self._transactions: Counter[str] = Counter()
        self._stall_after = dict(plan.stall_after)
        self._lock = threading.Lock()
        self.counts: Counter[Fault] = Counter()
        self.events: deque[FaultEvent] = deque(maxlen=MAX_RECORDED_EVENTS)

    def next_transaction(self, instrument: str) -> tuple[int, bool]:
        """Count one message; (its number, whether the instrument has stalled)."""
        with self._lock:
            self._transactions[instrument] += 1
            number = self._transactions[instrument]
            after = self._stall_after.get(instrument)
            stalled = after is not None and number > after
            if stalled:
                self._record(instrument, number, Fault.STALL)
            return number, stalled

    def fault_for_reply(self, instrument: str, transaction: int) -> Fault:
        plan = self.plan
        scripted = plan.scripted.get(instrument, {}).get(transaction, Fault.NONE)
        if not (plan.drop_rate or plan.garble_rate or plan.late_rate):
            if scripted is not Fault.NONE:
                with self._lock:
                    self._record(instrument, transaction, scripted)
            return scripted
        with self._lock:
            draw = self._generators[instrument].random()
            fault = scripted
            if fault is not Fault.NONE:
                pass  # the scripted fault; the draw is still taken, so the others stay put
            elif draw < plan.drop_rate:
                fault = Fault.DROP
            elif draw < plan.drop_rate + plan.garble_rate:
                fault = Fault.GARBLE
            elif draw < plan.drop_rate + plan.garble_rate + plan.late_rate:
                fault = Fault.LATE
            if fault is not Fault.NONE:
                self._record(instrument, transaction, fault)
            return fault

    def garbled(self, instrument: str, reply: bytes, termination: bytes) -> bytes:
        with self._lock:
            return garble(reply, termination, self._generators[instrument])

    def stall(self, instrument: str, after: int = 0) -> None:
        """From now on, `instrument` handles `after` more transactions, then stalls."""
        with self._lock:
            self._stall_after[instrument] = self._transactions[instrument] + after

    def answer_again(self, instrument: str) -> None:
        """End a stall: the next message is handled and answered as usual."""
        with self._lock:
            self._stall_after.pop(instrument, None)

    def transactions(self, instrument: str) -> int:
        with self._lock:
            return self._transactions[instrument]

    def _record(self, instrument: str, transaction: int, fault: Fault) -> None:
        self.counts[fault] += 1
        self.events.append(FaultEvent(instrument, transaction, fault))
