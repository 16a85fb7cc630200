"""Data time for every line: from the receive clock (live) or from the data itself (replay).

Live: a line's data time is the UTC time it was received (the caller's clock).
The GNSS time a sentence carries is still worked out (:class:`GnssDate`) and
kept beside the reading, for checks, never as its time.

Replay, in this order of preference:

1. a TAG block's ``c:`` time (see :meth:`ReplayClock.push_tagged`); once a
   stream has shown one, lines without one take the latest TAG time;
2. GNSS time: RMC and ZDA give date and time; GGA and GLL give the time of
   day, dated with the date of the latest RMC/ZDA (:class:`GnssDate`);
3. nothing: lines before the first GNSS time are held (bounded) and released
   at the first fix time; a stream with no time at all gets the caller's
   fallback time (:meth:`ReplayClock.flush` returns them with ``None``).

**Fix times and the lines between them.** A line whose GNSS time is later
than the current fix time starts a new fix. The lines since the previous fix
(that fix's own line first) are spread evenly over the interval between the
two fix times, so a receiver that repeats one time stamp for ten seconds
while its position moves (the time field of some units only advances every
10 s) still replays at the speed it reported. "Where the rate allows": when
the interval is longer than ``spread_cap_s`` or would put the lines much
further apart than the line rate seen so far (a GNSS outage, not a slow
clock), the lines are placed at the usual line period after the earlier fix
instead of being smeared across the gap. A line with the current fix time
(a GLL after its RMC), or up to ``behind_tolerance_s`` behind it (a second
receiver on the same talker whose clock lags), belongs to the current fix
(counted ``behind``).

**Midnight and dates.** A time of day is dated with the latest date; if that
puts it more than 12 h before (after) the latest GNSS time, it belongs to the
next (previous) day: a GGA at 00:00:01 arriving before the RMC of the new
date is dated correctly. A time of day before any date is held with its line
until one arrives (bounded by ``max_hold``), or dated with ``default_day``
when the caller gives one.

**Jumps (receiver reset, a file of several pieces).** A GNSS time more than
``max_gap_s`` ahead of, or more than ``behind_tolerance_s`` behind, the
current fix time is an outlier (counted ``outlier``; its line stays with the
current fix) until ``confirm_lines`` time-bearing lines in a row agree with
each other beyond the gate: then a new time segment starts (counted
``segment``). Forward, the new time is taken as it is. Backward, an offset
keeps the output moving on from the last output time at the usual line
period: output time never goes backwards. A single stuck or foreign clock
(a GLL repeating 04:59:59 for a whole passage among RMCs at 05:12) never
gets ``confirm_lines`` in a row and so never moves the time. The limit of the
rule: a single bad time less than ``max_gap_s`` ahead is taken as a fix; the
good times after it then confirm a backward segment, and the output runs on
from the bad time (ahead by that much) rather than going back.

**GNSS week rollover.** The GPS week number has 10 bits: a receiver whose
firmware pivot has passed reports a date exactly 1024 weeks (19.6 years) too
early. Rule: given a reference date ``not_before_utc`` (an installation's
"no data before" date, or a replay file's own epoch), a GNSS date more than
1024 weeks minus one year older than the reference gets 1024 weeks added
(counted ``week_rollover``, once per date). With a reference no later than
the true date plus a year, and no earlier than 18.6 years before it, a rolled
date is corrected and an honest one is left alone. Without a reference,
dates are taken as they come.
"""

from __future__ import annotations

from typing import Any

DAY_S = 86400.0
HALF_DAY_S = 43200.0
GPS_WEEK_ROLLOVER_S = 1024 * 7 * DAY_S  # 619 315 200 s
ROLLOVER_SLACK_S = GPS_WEEK_ROLLOVER_S - 365 * DAY_S


class GnssDate:
    """Seconds of day (+ date when the sentence has one) to UNIX time of the receiver."""

    def __init__(self, *, not_before_utc: float | None = None, default_day: int | None = None,
                 events: dict[str, int] | None = None) -> None:
        self.not_before_utc = not_before_utc
        self.day = default_day  # days since 1970-01-01 of the latest date
        self.last: float | None = None  # latest GNSS time resolved
        self.events = events if events is not None else {}
        self._rollover_days: dict[int, int] = {}  # raw day -> corrected day

    def _corrected(self, day: int) -> int:
        fixed = self._rollover_days.get(day)
        if fixed is None:
            fixed = day
            ref = self.not_before_utc
            weeks_days = 1024 * 7
            while ref is not None and fixed * DAY_S < ref - ROLLOVER_SLACK_S and fixed - day < 3 * weeks_days:
                fixed += weeks_days
            if fixed != day:
                self.events["week_rollover"] = self.events.get("week_rollover", 0) + 1
            self._rollover_days[day] = fixed
        return fixed

    def dated(self, tod_s: float, day: int) -> float:
        """A time with its own date (RMC, ZDA); it also dates the time-only sentences after it."""
        day = self._corrected(day)
        t = day * DAY_S + tod_s
        self.day, self.last = day, t
        return t

    def undated(self, tod_s: float) -> float | None:
        """A time of day (GGA, GLL) dated with the latest date, across midnight; None with no date yet."""
        if self.day is None:
            return None
        t = self.day * DAY_S + tod_s
        if self.last is not None:
            if t < self.last - HALF_DAY_S:
                t += DAY_S  # the day has turned before a sentence with the new date came
            elif t > self.last + HALF_DAY_S:
                t -= DAY_S  # a late line from before midnight
        self.day, self.last = int(t // DAY_S), t
        return t


Released = list[tuple[float | None, Any]]


class ReplayClock:
    """Output data times for items in arrival order, from the GNSS times some of them carry.

    ``push(item, t)``: ``t`` is the item's GNSS time (UNIX s, from :class:`GnssDate`) or
    None; ``tod_s`` an undated time of day to resolve once a date is known. Returns the
    items it can release now, as ``(t_s, item)`` in order; ``t_s`` is None only for
    items released without any time known (the caller gives them its fallback).
    """

    def __init__(self, dates: GnssDate, *, behind_tolerance_s: float = 30.0, max_gap_s: float = 600.0,
                 confirm_lines: int = 3, spread_cap_s: float = 30.0, max_pending: int = 20000,
                 max_hold: int = 5000, events: dict[str, int] | None = None) -> None:
        self.dates = dates
        self.behind_tolerance_s = behind_tolerance_s
        self.max_gap_s = max_gap_s
        self.confirm_lines = confirm_lines
        self.spread_cap_s = spread_cap_s
        self.max_pending = max_pending
        self.max_hold = max_hold
        self.events = events if events is not None else dates.events
        self.line_period_s: float | None = None  # running mean spacing of lines within a fix interval
        self._held: list[tuple[Any, float | None]] = []  # before the first fix time: (item, undated tod)
        self._pending: list[Any] = []  # since the current fix, its own line first
        self._fix_gnss: float | None = None  # GNSS time of the current fix
        self._fix_out: float | None = None  # its output time
        self._offset = 0.0  # output minus GNSS time in this segment
        self._cand_last: float | None = None  # candidate jump: latest GNSS time and how many in a row
        self._cand_n = 0
        self._tagged_t: float | None = None  # latest TAG time, once the stream has them
        self._tag_offset = 0.0  # output minus TAG time, after a clock set back
        self._tag_jump: list[tuple[Any, float | None]] = []  # items waiting on a TAG time jump

    def _count(self, what: str, n: int = 1) -> None:
        self.events[what] = self.events.get(what, 0) + n

    # --- TAG block times ---------------------------------------------------------------

    def push_tagged(self, item: Any, t_s: float) -> Released:
        """An item with its own TAG ``c:`` time: it wins over any GNSS time from now on.

        A TAG time more than ``max_gap_s`` ahead of, or more than ``behind_tolerance_s``
        behind, the latest one is a jump. The item waits (with any untagged lines after
        it) until ``confirm_lines`` TAG times in a row agree with each other: then the
        jump is real, forward a ``gap`` (the logger was off: times taken as they are),
        backward a ``segment`` (the logger's clock was set back: an offset keeps the
        output moving on from the latest time). Otherwise the waiting items were
        ``outlier`` times and take the latest time. A line a little behind takes the
        latest time, as before.
        """
        if self._tagged_t is None:
            out = self._release_all(t_s)
            self._tagged_t = t_s
            out.append((t_s, item))
            return out
        if self._tag_jump:
            return self._tag_candidate(item, t_s)
        # the usual case, every tagged line: within the gate, released at once at the latest time
        last = self._tagged_t
        t_out = t_s + self._tag_offset
        if not -self.behind_tolerance_s <= t_out - last <= self.max_gap_s:
            self._tag_jump = [(item, t_s)]
            return []
        if t_out > last:  # max(), written out: a line a little behind takes the latest time
            self._tagged_t = last = t_out
        return [(last, item)]

    def _tag_candidate(self, item: Any, t_s: float | None) -> Released:
        """One more item while a jump waits for confirmation (``t_s`` None: untagged)."""
        jump = self._tag_jump
        if t_s is None:
            jump.append((item, None))
            return self._tag_refuted() if len(jump) > self.max_pending else []
        last = next(t for _, t in reversed(jump) if t is not None)
        if not -self.behind_tolerance_s <= t_s - last <= self.max_gap_s:
            out = self._tag_refuted()
            return out + self.push_tagged(item, t_s)
        jump.append((item, t_s))
        if sum(t is not None for _, t in jump) < self.confirm_lines:
            return []
        return self._tag_confirmed()

    def _tag_refuted(self) -> Released:
        """The waiting TAG times were outliers: their lines take the latest time."""
        jump, self._tag_jump = self._tag_jump, []
        self._count("outlier", sum(t is not None for _, t in jump))
        return [(self._tagged_t, it) for it, _ in jump]

    def _tag_confirmed(self) -> Released:
        assert self._tagged_t is not None
        jump, self._tag_jump = self._tag_jump, []
        first = jump[0][1]
        assert first is not None
        if first + self._tag_offset > self._tagged_t:
            self._count("gap")
        else:
            self._count("segment")
            self._tag_offset = self._tagged_t - first
        out: Released = []
        for it, t in jump:
            if t is not None:
                self._tagged_t = max(t + self._tag_offset, self._tagged_t)
            out.append((self._tagged_t, it))
        return out

    # --- GNSS times ------------------------------------------------------------------------

    def push(self, item: Any, t_s: float | None, tod_s: float | None = None) -> Released:
        if self._tagged_t is not None:
            return self._tag_candidate(item, None) if self._tag_jump else [(self._tagged_t, item)]
        if self._fix_out is None:
            return self._before_first_fix(item, t_s, tod_s)
        return self._after_fix(item, t_s)

    def _before_first_fix(self, item: Any, t_s: float | None, tod_s: float | None) -> Released:
        if t_s is None:
            self._held.append((item, tod_s))
            if len(self._held) > self.max_hold:
                self._count("untimed", len(self._held))
                out: Released = [(None, it) for it, _ in self._held]
                self._held = []
                return out
            return []
        # The first time: date the held times of day, then run everything held through the
        # clock in arrival order; lines before the first time-bearing one take its time.
        held, self._held = self._held, []
        resolved = [(it, self.dates.undated(tod) if tod is not None else None) for it, tod in held]
        resolved.append((item, t_s))
        out: Released = []
        early: list[Any] = []
        for it, t in resolved:
            if self._fix_out is not None:
                out.extend(self._after_fix(it, t))
            elif t is None:
                early.append(it)
            else:
                self._start_fix(it, t, t)
                out.extend((t, e) for e in early)
        return out

    def _start_fix(self, item: Any, t_gnss: float, t_out: float) -> None:
        self._pending = [item]
        self._fix_gnss, self._fix_out = t_gnss, t_out
        self._offset = t_out - t_gnss
        self._cand_n = 0

    def _after_fix(self, item: Any, t_s: float | None) -> Released:
        if t_s is None:
            self._pending.append(item)
            if len(self._pending) > self.max_pending:
                return self._overflow()
            return []
        assert self._fix_gnss is not None and self._fix_out is not None
        d = t_s - self._fix_gnss
        if -self.behind_tolerance_s <= d <= 0.0:
            if d < 0.0:
                self._count("behind")
            self._cand_n = 0
            self._pending.append(item)
            return []
        if 0.0 < d <= self.max_gap_s:
            return self._new_fix(item, t_s, t_s + self._offset)
        return self._jump(item, t_s, d)

    def _jump(self, item: Any, t_s: float, d: float) -> Released:
        last = self._cand_last
        if self._cand_n and last is not None and -self.behind_tolerance_s <= t_s - last <= self.max_gap_s:
            self._cand_n += 1
        else:
            self._cand_n = 1
        self._cand_last = t_s
        if self._cand_n < self.confirm_lines:
            self._count("outlier")
            self._pending.append(item)
            return []
        self._count("segment")
        if d > 0:
            return self._new_fix(item, t_s, t_s + self._offset)
        assert self._fix_out is not None
        t_out = self._fix_out + len(self._pending) * (self.line_period_s or 0.0)
        return self._new_fix(item, t_s, t_out)

    def _new_fix(self, item: Any, t_gnss: float, t_out: float) -> Released:
        assert self._fix_out is not None
        out = self._spread(self._pending, self._fix_out, t_out)
        self._start_fix(item, t_gnss, t_out)
        return out

    def _spread(self, items: list[Any], t0: float, t1: float) -> Released:
        """Items evenly over [t0, t1) where the rate allows, else at the usual line period from t0."""
        n = len(items)
        if n == 0:
            return []
        interval = max(t1 - t0, 0.0)
        per = interval / n
        typical = self.line_period_s
        if interval <= self.spread_cap_s and (typical is None or per <= 4.0 * typical):
            step = per
            self.line_period_s = per if typical is None else 0.9 * typical + 0.1 * per
        else:
            step = min(per, typical if typical is not None else 1.0)
        return [(t0 + i * step, it) for i, it in enumerate(items)]

    def _overflow(self) -> Released:
        """A clock stuck on one time for too long: release at the line period, move the fix on."""
        assert self._fix_out is not None and self._fix_gnss is not None
        self._count("pending_overflow")
        step = self.line_period_s or 0.0
        out = [(self._fix_out + i * step, it) for i, it in enumerate(self._pending)]
        advance = len(self._pending) * step
        self._fix_out += advance
        self._fix_gnss += advance
        self._pending = []
        return out

    def _release_all(self, t_end: float | None) -> Released:
        out: Released = []
        if self._held:
            self._count("untimed" if t_end is None else "held_to_first_time", len(self._held))
            out.extend((t_end, it) for it, _ in self._held)
            self._held = []
        if self._pending:
            assert self._fix_out is not None
            end = t_end if t_end is not None else self._fix_out + len(self._pending) * (self.line_period_s or 0.0)
            out.extend(self._spread_tail(self._pending, self._fix_out, end))
            self._pending = []
        return out

    def _spread_tail(self, items: list[Any], t0: float, t1: float) -> Released:
        """The last lines: at the usual line period after the last fix, never past t1."""
        step = self.line_period_s or 0.0
        n = len(items)
        if n > 1 and t1 > t0:
            step = min(step, (t1 - t0) / n) if step else 0.0
        return [(t0 + i * step, it) for i, it in enumerate(items)]

    def flush(self) -> Released:
        """End of stream: everything still buffered, in order."""
        if self._tag_jump:
            return self._tag_refuted()
        return self._release_all(None)

