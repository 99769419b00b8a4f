"""Which records of a log or stream are in time order: one mis-stamped record must not blind the rest.

The rule (ours; documented in docs/inspect.md):

- a record *follows* the timeline when its time is at or after the last accepted record's and at
  most ``TIME_JUMP_S`` later;
- a record that does not follow (it goes back in time, or jumps ahead by more than
  ``TIME_JUMP_S``) is a *candidate*. Candidates in a row whose times do not decrease form a chain;
- if a record follows the old timeline again, the chain before it is set aside as time outliers
  (one reading stamped in milliseconds among seconds, a ``t: 1e300``): the timeline goes on as if
  they were not there;
- if the chain reaches ``CONFIRM`` records, the clock really jumped (a log resumed after a long
  pause, a robot whose clock restarted): the timeline moves to the chain. A chain that went back
  in time *restarts* the clock: consumers must not integrate motion across it;
- before anything is accepted, the first ``CONFIRM`` records must form a chain (so a first record
  that is an outlier does not set the timeline); at the end of the input a chain that never
  reached ``CONFIRM`` is accepted if nothing was accepted before it, else set aside.

Times beyond ``MAX_TIME_S`` are no time stamps of a robot log (even a Unix time in seconds is
below 2e9) and are set aside at once; a log stamped in milliseconds since 1970 is refused loudly
row by row rather than replayed wrongly.

``hold=True`` (a log read from start to end) holds candidates until the chain is decided, so no
record is lost at a real jump.  ``hold=False`` (a live stream, which answers each line at once)
refuses candidates as they come and accepts the ``CONFIRM``-th record of a chain; the records
before it in the chain are lost, and each was answered with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Timeline", "Verdict", "TIME_JUMP_S", "CONFIRM", "MAX_TIME_S", "ACCEPT", "RESTART"]

TIME_JUMP_S = 60.0
"""Longest step forward between consecutive records accepted without confirmation (our choice: a
robot logging odometry pauses for less than a minute unless something happened)."""
CONFIRM = 3
"""Records in a row that confirm a jump of the clock (our choice: two outliers in a row are rare, three
agreeing ones are a new timeline)."""
MAX_TIME_S = 1e11
"""Largest time stamp accepted, in seconds (3,000 years; a Unix time in milliseconds is above it)."""

ACCEPT = "accept"
RESTART = "restart"  # accepted, and the clock restarted before it: do not integrate motion across


@dataclass(frozen=True)
class Verdict:
    item: object
    decision: str  # ACCEPT, RESTART or "set aside"
    reason: str = ""

    @property
    def accepted(self) -> bool:
        return self.decision in (ACCEPT, RESTART)


class Timeline:
    """Feed records with ``offer(t, item)`` in input order; each returns the verdicts it decides, in input order."""

    def __init__(self, *, hold: bool = True, strict: bool = False, restarts: bool = True):
        self.hold, self.strict, self.restarts = hold, strict, restarts
        self.last: float | None = None
        self._first: tuple[float, object] | None = None  # held until the records after it agree with it
        self._chain: list[tuple[float, object]] = []
        self._before: float | None = None  # ``last`` before the latest accept, for ``retract``

    def offer(self, t: float, item) -> list[Verdict]:
        if not abs(t) <= MAX_TIME_S:
            return [Verdict(item, "set aside", f"time {t:g} s is beyond {MAX_TIME_S:g} s: not a time stamp in seconds")]
        if self.last is None:
            self._before, self.last = None, t
            if self.hold:  # the first record is kept back until a later one agrees with it
                self._first = (t, item)
                return []
            return [Verdict(item, ACCEPT)]  # a stream answers its first line at once
        if self._follows(self.last, t, jump=True):
            out = self._release_first() + self._drop_chain()
            self._before, self.last = self.last, t
            return [*out, Verdict(item, ACCEPT)]
        out = []
        if self._chain and not self._follows(self._chain[-1][0], t, jump=False):
            out = self._drop_chain()
        if not self.restarts and t < self.last:
            return [*out, Verdict(item, "set aside", self._reason(t))]
        self._chain.append((t, item))
        if len(self._chain) >= CONFIRM:
            return out + self._take_chain()
        if not self.hold:
            more = CONFIRM - len(self._chain)
            why = f"{self._reason(t)}; {more} more record(s) in order after it would move the timeline"
            return [*out, Verdict(item, "set aside", why)]
        return out

    def flush(self) -> list[Verdict]:
        """The verdicts of the records still held at the end of the input."""
        return self._release_first() + self._drop_chain()

    def retract(self) -> None:
        """The record just accepted was refused by its consumer after all (an unusable reading): its time
        does not count (a stream only; a held log's reader checks records before offering them)."""
        self.last = self._before

    # ------------------------------------------------------------ inside
    def _follows(self, last: float, t: float, jump: bool) -> bool:
        after = t > last if self.strict else t >= last
        return after and (not jump or t - last <= TIME_JUMP_S)

    def _reason(self, t: float) -> str:
        last = self.last
        if t < last or (self.strict and t == last):
            return f"time {t:g} s is before the previous record's {last:g} s"
        return (
            f"time {t:g} s jumps {t - last:g} s past the previous record's {last:g} s "
            f"(more than {TIME_JUMP_S:g} s): a time outlier"
        )

    def _release_first(self) -> list[Verdict]:
        first, self._first = self._first, None
        return [] if first is None else [Verdict(first[1], ACCEPT)]

    def _drop_chain(self) -> list[Verdict]:
        chain, self._chain = self._chain, []
        if not self.hold:  # already answered one by one
            return []
        return [Verdict(item, "set aside", self._reason(t)) for t, item in chain]

    def _take_chain(self) -> list[Verdict]:
        chain, self._chain = self._chain, []
        out: list[Verdict] = []
        restart = chain[0][0] < self.last
        if self._first is not None:
            if restart:  # the records after the first one agree among themselves, not with it: it was the outlier
                t0, item = self._first
                self._first = None
                out.append(
                    Verdict(item, "set aside", f"time {t0:g} s does not agree with the {CONFIRM} records after it")
                )
                restart = False  # nothing was accepted before the chain
            else:
                out += self._release_first()
        taken = chain if self.hold else chain[-1:]
        self._before, self.last = self.last, chain[-1][0]
        return out + [Verdict(item, RESTART if restart and i == 0 else ACCEPT) for i, (_, item) in enumerate(taken)]
