"""Which source feeds the estimators when two give the same kind of sample.

For every sample kind (``estimators.samples.kind_of``) the sources are ranked:
first those named in the configured order for that kind, then any others in
the order they were first seen. So with no configuration the first GNSS heard
is preferred, and two interleaved receivers never both feed the filters.

A reading is accepted when its source is the best-ranked *fresh* one: a source
is fresh while its newest reading of that kind is at most ``stale_s[kind]``
seconds older than the newest data time seen by the selector. When the
preferred source goes stale the next fresh one takes over; when the preferred
one speaks again it takes back over at once. All times are data times
(``sample.t_s``), so replay decides exactly as the live run did.

Two GNSS receivers that are both fresh are also compared: when their newest
fixes (at most ``PAIR_WITHIN_S`` apart in time) stay more than ``disagree_m``
apart for ``DISAGREE_HOLD_S``, one of them is wrong (multipath, a receiver
left on dead reckoning, a spoofed or jammed one) and the filters follow only
one. ``tick`` then returns the warning ``gnss_disagree``, saying by how much
they differ, which one is followed and where the other puts the boat; the
status carries the same (``snapshot()["disagreement"]``). Two good receivers
agree to some metres (common practice: a few metres 95 % for a modern GNSS
in open sky), so the default of 500 m is far beyond their noise and well
inside the mile that matters near a coast.

``quiet``: reading a passage back (``daemon.outlets.passage``) asks the selector
again to choose as the service chose; what it logs then was already logged when
the passage was live, so a quiet selector logs it at debug level only.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence

from geographiclib.geodesic import Geodesic

from daemon.errors import ConfigError
from daemon.core.readings import Reading
from estimators.base import WARNING, Condition
from estimators import wording
from estimators.samples import KIND_NAMES, Fix

log = logging.getLogger(__name__)

# Seconds of silence after which a source no longer counts as fresh for a kind.
DEFAULT_STALE_S: dict[str, float] = {
    "fix": 5.0,
    "ground_velocity": 5.0,
    "heading": 5.0,
    "water_speed": 10.0,
    "pressure": 60.0,
}
OTHER_STALE_S = 30.0
KINDS = frozenset(KIND_NAMES.values())
DISAGREE_M = 500.0       # two fresh receivers' fixes further apart than this disagree
DISAGREE_HOLD_S = 10.0   # ... for this long before it is said (one bad fix is not a disagreement)
PAIR_WITHIN_S = 2.0      # fixes compared only when at most this far apart in time
DISAGREE_ALERT = "gnss_disagree"
NM_M = 1852.0


class PrioritySelector:
    """Accept or refuse each reading so that one source per kind feeds the estimators.

    ``order`` maps a kind name to source names, best first; ``stale_s`` maps a
    kind name to seconds (added to, and overriding, ``DEFAULT_STALE_S``).
    """

    def __init__(self, order: Mapping[str, Sequence[str]] | None = None,
                 stale_s: Mapping[str, float] | None = None, disagree_m: float = DISAGREE_M,
                 quiet: bool = False) -> None:
        order = dict(order or {})
        stale_s = dict(stale_s or {})
        _check_kinds(order, "priority")
        _check_kinds(stale_s, "priority.stale_s")
        for kind, seconds in stale_s.items():
            if not (isinstance(seconds, (int, float)) and seconds > 0):
                raise ConfigError(f"priority.stale_s.{kind} = {seconds!r}: give a number of seconds > 0")
        self._order = {kind: list(names) for kind, names in order.items()}
        self._stale_s = {**DEFAULT_STALE_S, **{k: float(v) for k, v in stale_s.items()}}
        self._seen: dict[str, dict[str, float]] = {}  # kind -> source -> newest t_s (first-seen order)
        self._active: dict[str, str] = {}
        self._switches: dict[str, int] = {}
        self._accepted: dict[str, dict[str, int]] = {}
        self._refused: dict[str, dict[str, int]] = {}
        self._now = float("-inf")
        self._disagree_m = disagree_m
        self._fixes: dict[str, Fix] = {}           # source -> its newest fix
        self._apart_since: float | None = None     # data time the fresh receivers began to disagree
        self._apart: tuple[str, str, float] | None = None  # (followed, other, distance m) while they do
        self._said = False                         # the warning's condition was reported active
        self.quiet = quiet                         # reading back: said already, live (module docstring)

    def _log(self, level: int, text: str, *args: object) -> None:
        log.log(logging.DEBUG if self.quiet else level, text, *args)

    def stale_after_s(self, kind: str) -> float:
        return self._stale_s.get(kind, OTHER_STALE_S)

    def accept(self, reading: Reading) -> bool:
        """True when ``reading`` comes from the source that should feed the estimators now."""
        sample, source = reading.sample, reading.source
        kind = KIND_NAMES[type(sample)]  # kind_of, without the call: asked for every reading
        t_s = sample.t_s
        if t_s > self._now:  # max(), written out: NaN never moves it
            self._now = t_s
        seen = self._seen.get(kind)
        if seen is None:
            seen = self._seen[kind] = {}
        newest = seen.get(source)
        seen[source] = newest if newest is not None and newest > t_s else t_s
        # one receiver of this kind so far (the common case): it is the best there is
        best = source if len(seen) == 1 else self._best_fresh(kind, seen)
        if best != self._active.get(kind):
            self._switch(kind, best, seen)
        if type(sample) is Fix:
            self._compare_fixes(source, sample, best)
        ok = source == best
        per_source = (self._accepted if ok else self._refused).get(kind)
        if per_source is None:
            per_source = (self._accepted if ok else self._refused)[kind] = {}
        per_source[source] = per_source.get(source, 0) + 1
        return ok

    def _ranked(self, kind: str, seen: Mapping[str, float]) -> list[str]:
        configured = self._order.get(kind, [])
        return configured + [s for s in seen if s not in configured]

    def _best_fresh(self, kind: str, seen: Mapping[str, float]) -> str:
        limit = self.stale_after_s(kind)
        ranked = [s for s in self._ranked(kind, seen) if s in seen]
        for source in ranked:
            if self._now - seen[source] <= limit:
                return source
        return ranked[0]  # unreachable in practice: the reading's own source is fresh

    def _switch(self, kind: str, best: str, seen: Mapping[str, float]) -> None:
        previous = self._active.get(kind)
        self._active[kind] = best
        if previous is None:
            self._log(logging.INFO, "priority: %s from %s", kind, best)
            return
        self._switches[kind] = self._switches.get(kind, 0) + 1
        silent = self._now - seen.get(previous, self._now)
        if self._ranked(kind, seen).index(best) < self._ranked(kind, seen).index(previous):
            self._log(logging.INFO, "priority: %s back to %s (preferred source heard again)", kind, best)
        else:
            self._log(logging.WARNING, "priority: %s now from %s (%s silent for %.0f s)", kind, best, previous, silent)

    def _compare_fixes(self, source: str, fix: Fix, followed: str) -> None:
        """Measure the followed receiver against every other fresh one (geodesic distance, WGS84)."""
        self._fixes[source] = fix
        ours = self._fixes.get(followed)
        # one receiver (the common case) has nothing to compare with: no comprehension for its every fix
        fresh = {other: theirs for other, theirs in self._fixes.items()
                 if self._now - theirs.t_s <= self.stale_after_s("fix")} if len(self._fixes) > 1 else {}
        if followed not in fresh or len(fresh) < 2:
            self._apart_since, self._apart = None, None  # nothing left to compare with
            return
        worst: tuple[str, str, float] | None = None
        for other, theirs in fresh.items():
            if other == followed or abs(theirs.t_s - ours.t_s) > PAIR_WITHIN_S:
                continue  # not of the same moment: judged at the next pair
            d_m = Geodesic.WGS84.Inverse(ours.lat_deg, ours.lon_deg, theirs.lat_deg, theirs.lon_deg)["s12"]
            if worst is None or d_m > worst[2]:
                worst = (followed, other, d_m)
        if worst is None:
            return
        if worst[2] > self._disagree_m:
            if self._apart_since is None:
                self._apart_since = fix.t_s
            self._apart = worst
        else:
            self._apart_since, self._apart = None, None

    def tick(self, t_s: float) -> list[Condition]:
        """The ``gnss_disagree`` condition when it changes (or its figures do, while it holds)."""
        apart = self._apart
        if apart is not None and self._apart_since is not None and t_s - self._apart_since >= DISAGREE_HOLD_S:
            followed, other, d_m = apart
            where = self._fixes[other]
            text = (f"GNSS receivers disagree by {d_m / NM_M:.2f} nm ({d_m:.0f} m): following {followed}; "
                    f"{other} puts the boat at {wording.position(where.lat_deg, where.lon_deg)}. Check both against "
                    f"another position (radar range, depth contour, a bearing) and the priority order.")
            if not self._said:
                self._log(logging.WARNING, "priority: %s", text)
            self._said = True
            return [Condition(t_s, DISAGREE_ALERT, WARNING, True, text,
                              {"following": followed, "other": other, "distance_m": round(d_m)})]
        if self._said and apart is None:
            self._said = False
            return [Condition(t_s, DISAGREE_ALERT, WARNING, False, "The GNSS receivers agree again.", {})]
        return []

    def active(self, kind: str) -> str | None:
        """The source currently feeding ``kind``, or None before any reading of it."""
        return self._active.get(kind)

    def snapshot(self) -> dict:
        """Counters for status: active source, switches, accepted and refused readings per kind."""
        return {
            "active": dict(self._active),
            "switches": dict(self._switches),
            "accepted": {k: dict(v) for k, v in self._accepted.items()},
            "refused": {k: dict(v) for k, v in self._refused.items()},
            "disagreement": None if self._apart is None else {
                "following": self._apart[0], "other": self._apart[1], "distance_m": round(self._apart[2])},
        }


def _check_kinds(table: Mapping[str, object], section: str) -> None:
    for kind in table:
        if kind not in KINDS:
            raise ConfigError(
                f"{section}.{kind}: unknown sample kind; use one of {', '.join(sorted(KINDS))}")
