"""heading_suspect: a compass that stays put while the ground track turns.

Theory of operation. Compasses and the gateways between them and the network
often fail by freezing: the last reading repeats, well formed, at the usual
rate, so no staleness check sees it. Fused, a frozen heading puts the water
velocity on the old course while the ground track has turned, and the whole
difference lands in the current (a 95 degree course change at 6 kn makes
about 9 kn of current that is not there).

The test uses only two facts of a boat under way (common practice, no
published method is claimed):

1. A working compass on a moving boat never reads one value for long: wave
   yaw and steering move it by degrees within seconds. Across the time the
   track turned, the spread of the heading readings (largest circular
   departure from their mean, degrees) is small only for a frozen one.
2. When the boat turns, the ground track turns with it. A current can turn
   the track too, but slowly: even a strong current's edge takes minutes to
   cross, while a course change turns the track within a minute.

So at each fix with SOG >= ``min_sog_kn``: with COG(t) the course over ground
and H(t) the newest heading, over every earlier fix t0 in the window
(SOG >= ``min_sog_kn`` too)::

    turn_cog = |wrap(COG(t) - COG(t0))|,   turn_hdg = |wrap(H(t) - H(t0))|
    suspect  when  turn_cog >= turn_deg  and  turn_hdg <= follow_ratio * turn_cog
                   and  spread(H over [t0, t]) <= frozen_spread_deg

The heading must have stayed within ``frozen_spread_deg`` for at least
``min_frozen_s`` (a live compass on autopilot in a calm can read still for a
few seconds), and the fix before must already show at least half of the
track's turn, the same way (a turn builds up over fixes; one multipath COG
does not, and waiting for a second convicting fix would let one more second
of the frozen heading reach the current).

The fault holds while the heading stays within ``frozen_spread_deg`` of the
value it froze at; the first reading that departs from it (the compass is
alive again) ends it. While it holds, the condition says so as the warning
``heading_suspect`` (the current and dead reckoning both lean on the compass,
and an autopilot steering by it steers blind) and a ``Distrust`` of the kind
``heading`` asks the pipeline to withhold headings from the fusing estimators
(they are still recorded and shown).
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

from estimators.angles import circular_mean_deg, wrap_180
from estimators.base import WARNING, Condition, Context, Distrust, EstimatorBase, Output
from estimators.params import param
from estimators.samples import Fix, GroundVelocity, Heading, Sample

ALERT_ID = "heading_suspect"
KIND = "heading"


@dataclass(frozen=True)
class IntegrityParams:
    """The [integrity] section: when a compass counts as frozen."""

    window_s: float = param(60.0, "s", 10.0, 600.0, "how far back a turn of the ground track is looked for")
    turn_deg: float = param(30.0, "deg", 10.0, 180.0, "a ground-track turn at least this large within the window")
    follow_ratio: float = param(0.3, "", 0.0, 0.9, "the heading turned less than this fraction of the track")
    frozen_spread_deg: float = param(1.0, "deg", 0.0, 10.0,
                                     "heading readings all within this of their mean (a live compass yaws more)")
    min_sog_kn: float = param(2.0, "kn", 0.5, 20.0, "below this the course over ground is too noisy to judge")
    min_frozen_s: float = param(10.0, "s", 2.0, 120.0,
                                "the heading must have stayed within frozen_spread_deg at least this long")


class HeadingIntegrity(EstimatorBase):
    """Watches the compass against the ground track; sees headings even while they are distrusted."""

    name = "integrity"
    accepts = (Fix, GroundVelocity, Heading)
    sees_distrusted = True

    def __init__(self, params: IntegrityParams | None = None) -> None:
        self.params = params or IntegrityParams()
        self._headings: deque[tuple[float, float]] = deque()
        self._tracks: deque[tuple[float, float, float]] = deque()  # (t, cog, heading then)
        # The COG unwrapped (each fix's turn from the one before added on) and the window's highest and
        # lowest of it (monotone queues of (fix number, unwrapped)): no earlier fix can be a turn away
        # while both are nearer the newest than turn_deg, so a straight leg costs a comparison, not a scan.
        self._unwrapped = 0.0
        self._tracks_added = 0
        self._highest: deque[tuple[int, float]] = deque()
        self._lowest: deque[tuple[int, float]] = deque()
        self._frozen_at: float | None = None  # the heading value it froze at, while suspect

    @property
    def suspect(self) -> bool:
        return self._frozen_at is not None

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, Heading):
            return self._heading(sample)
        cog, sog = sample.cog_deg, sample.sog_kn
        if cog is None or sog is None or not (math.isfinite(cog) and math.isfinite(sog)):
            return ()
        return self._track(sample.t_s, cog, sog)

    def _heading(self, h: Heading) -> Sequence[Output]:
        if not math.isfinite(h.true_deg):
            return ()
        self._headings.append((h.t_s, h.true_deg))
        self._forget(h.t_s)
        if self.suspect and abs(wrap_180(h.true_deg - self._frozen_at)) > self.params.frozen_spread_deg:
            self._frozen_at = None
            text = f"The compass moves again ({h.true_deg:03.0f}°): headings are used again."
            return (Condition(h.t_s, ALERT_ID, WARNING, False, text, {"heading_deg": round(h.true_deg, 1)}),
                    Distrust(h.t_s, KIND, False, "compass moves again"))
        return ()

    def _track(self, t_s: float, cog: float, sog: float) -> Sequence[Output]:
        p = self.params
        if not self._headings or sog < p.min_sog_kn:
            return ()
        heading_now = self._headings[-1][1]
        self._note_turn(cog)
        self._tracks.append((t_s, cog, heading_now))
        self._forget(t_s)
        if self.suspect or not self._turned_in_window():
            return ()
        matches = self._convicting(t_s, cog, heading_now)
        if not matches:
            return ()
        t0, turn_cog, turn_hdg, spread = matches[-1]  # the quickest turn tells it best
        return self._raise(t_s, heading_now, turn_cog, turn_hdg, t0, spread, since_s=matches[0][0])

    def _note_turn(self, cog: float) -> None:
        """Carry the unwrapped COG on to this fix and keep the monotone queues of its extremes."""
        if self._tracks:
            self._unwrapped += wrap_180(cog - self._tracks[-1][1])
        else:  # a new start: the queues' values belong to the old one
            self._unwrapped = cog
            self._highest.clear()
            self._lowest.clear()
        n, u = self._tracks_added, self._unwrapped
        self._tracks_added += 1
        while self._highest and self._highest[-1][1] <= u:
            self._highest.pop()
        self._highest.append((n, u))
        while self._lowest and self._lowest[-1][1] >= u:
            self._lowest.pop()
        self._lowest.append((n, u))

    def _turned_in_window(self) -> bool:
        """Whether some fix in the window may lie turn_deg or more from the newest. |wrap(COG - COG0)| is at
        most the unwrapped difference, so nearer extremes mean none does; the margin covers the rounding of
        the sum (1e-9 deg after a million fixes), so the scan decides every case near the threshold."""
        oldest = self._tracks_added - len(self._tracks)  # fixes leave the window oldest first, by number
        for q in (self._highest, self._lowest):
            while q[0][0] < oldest:  # the newest fix is in both queues and in the window: they never empty
                q.popleft()
        reach = self.params.turn_deg - 1e-6
        u = self._unwrapped
        return self._highest[0][1] - u >= reach or u - self._lowest[0][1] >= reach

    def _convicting(self, t_s: float, cog: float, heading_now: float) -> list[tuple[float, float, float, float]]:
        """(t0, track turn, heading turn, spread) of every earlier fix in the window that convicts the compass."""
        p = self.params
        matches = []
        tracks = list(self._tracks)
        before = tracks[-2][1] if len(tracks) >= 2 else None  # the fix before this one's COG
        # the cheapest test first: on a straight leg no earlier fix is a turn away, and the loop ends there
        fmod = math.fmod
        for i, (t0, cog0, heading0) in enumerate(tracks[:-1]):
            d = fmod(cog - cog0 + 180.0, 360.0)  # signed_turn = wrap_180(cog - cog0), written out: the hot loop
            if d < 0.0:
                d += 360.0
            signed_turn = (0.0 if d >= 360.0 else d) - 180.0
            turn_cog = abs(signed_turn)
            if turn_cog < p.turn_deg:
                continue
            turn_hdg = abs(wrap_180(heading_now - heading0))
            if turn_hdg > p.follow_ratio * turn_cog:
                continue
            if self._lone(tracks[i - 1][1] if i else tracks[i + 1][1], cog0, tracks[i + 1][1]):
                continue  # one multipath COG is no place to measure a turn from (asked only past the turn test)
            # a turn builds up: the fix before already shows half of it, the same way (one multipath COG does not)
            turn_before = wrap_180(before - cog0) if before is not None else 0.0
            if turn_before * signed_turn <= 0 or abs(turn_before) < 0.5 * turn_cog:
                continue
            spread = self._heading_spread(min(t0, t_s - p.min_frozen_s))
            if spread is not None and spread <= p.frozen_spread_deg:
                matches.append((t0, turn_cog, turn_hdg, spread))
        return matches

    def _raise(self, t_s: float, heading: float, turn_cog: float, turn_hdg: float, t0: float,
               spread: float, since_s: float) -> Sequence[Output]:
        self._frozen_at = heading
        over_s = t_s - t0
        values = {"heading_deg": round(heading, 1), "track_turn_deg": round(turn_cog, 0),
                  "heading_turn_deg": round(turn_hdg, 1), "over_s": round(over_s, 0),
                  "heading_spread_deg": round(spread, 2)}
        text = (f"Compass stuck at {heading:03.0f}°: the ground track turned {turn_cog:.0f}° in {over_s:.0f} s "
                f"while the heading moved {turn_hdg:.1f}°. Headings are set aside (current and dead reckoning "
                f"held) until it moves again: check the compass, its feed, and any autopilot steering by it.")
        return (Condition(t_s, ALERT_ID, WARNING, True, text, values),
                Distrust(t_s, KIND, True, "compass stuck while the ground track turns", since_s=since_s))

    def _lone(self, cog_before: float, cog: float, cog_after: float) -> bool:
        """A COG that leaves both neighbours by more than half a turn the same way: a spike, not a turn."""
        a, b = wrap_180(cog - cog_before), wrap_180(cog - cog_after)
        return a * b > 0 and min(abs(a), abs(b)) > 0.5 * self.params.turn_deg

    def _heading_spread(self, since_s: float) -> float | None:
        """Largest circular departure of the headings since ``since_s`` from their mean, degrees.

        Only the readings across the track's turn count: a compass that froze as the turn began is
        caught at once, not a window later.
        """
        values = [v for t, v in self._headings if t >= since_s]
        mean = circular_mean_deg(values) if len(values) >= 3 else None
        if mean is None:
            return None
        return max(abs(wrap_180(v - mean)) for v in values)

    def _forget(self, t_s: float) -> None:
        start = t_s - self.params.window_s
        while self._headings and self._headings[0][0] < start:
            self._headings.popleft()
        while self._tracks and self._tracks[0][0] < start:
            self._tracks.popleft()
