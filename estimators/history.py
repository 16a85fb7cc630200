"""Recent samples by kind, so an estimator can ask e.g. for the circular mean
heading over the last fix interval. Bounded by age, so memory stays flat.
"""

from __future__ import annotations

import bisect
import operator
from collections import deque

from estimators.angles import circular_mean_deg
from estimators.samples import Heading, Sample


_time = operator.attrgetter("t_s")  # the bisect key: a sample's time, without a Python call per look


class SampleHistory:
    """Per sample type, a deque of samples no older than ``keep_s`` behind the newest."""

    def __init__(self, keep_s: float = 600.0) -> None:
        self.keep_s = keep_s
        self._by_type: dict[type, deque[Sample]] = {}

    def add(self, sample: Sample) -> None:
        q = self._by_type.get(type(sample))
        if q is None:  # setdefault would make a deque for every sample
            q = self._by_type[type(sample)] = deque()
        if q and sample.t_s < q[-1].t_s:
            return  # the pipeline delivers in time order; a stray late sample is not history
        q.append(sample)
        horizon = sample.t_s - self.keep_s
        while q and q[0].t_s < horizon:
            q.popleft()

    def latest(self, kind: type) -> Sample | None:
        q = self._by_type.get(kind)
        return q[-1] if q else None

    def between(self, kind: type, t0_s: float, t1_s: float) -> list[Sample]:
        """Samples of ``kind`` with t0 < t_s <= t1, oldest first."""
        q = self._by_type.get(kind)
        if not q:
            return []
        # deque indexing is O(n) in the middle, but the asked-for window is at the young end
        lo = bisect.bisect_right(q, t0_s, key=_time)
        hi = bisect.bisect_right(q, t1_s, lo=lo, key=_time)
        return [q[i] for i in range(lo, hi)]

    def mean_heading_deg(self, t0_s: float, t1_s: float) -> float | None:
        """Circular mean of true headings over (t0, t1], or None with none there."""
        return circular_mean_deg([h.true_deg for h in self.between(Heading, t0_s, t1_s)])
