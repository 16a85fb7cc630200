"""What an estimator is to the pipeline, and what it hands back.

An estimator is a plug-in: it names the sample kinds it wants, is stepped with
each one in time order, and returns publications (a topic's new state, or an
event) and conditions (the raw truth of an alert's condition at that moment).
The daemon turns conditions into alerts with their lifecycle; estimators only
say whether the condition holds, with text and values.

"Now" inside an estimator is the newest time it was given (a sample's ``t_s``
or a ``tick``); it never reads a clock.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol, runtime_checkable

from estimators.history import SampleHistory
from estimators.samples import Sample

ALARM, WARNING, CAUTION = "alarm", "warning", "caution"
PRIORITIES = (ALARM, WARNING, CAUTION)


# not frozen: made for every state an estimator publishes (several a second) (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class Publication:
    """A new state for ``topic`` (relative to the prefix: ``current``, ``events``...)."""

    t_s: float
    topic: str
    payload: Mapping[str, Any]
    retain: bool = True


@dataclass(frozen=True, slots=True)
class Condition:
    """Whether alert ``alert_id``'s condition holds at ``t_s``.

    ``text`` says what was seen and what to check, never what to do at the helm;
    the daemon appends its advisory sentence. ``values`` are the numbers that raised it.
    """

    t_s: float
    alert_id: str
    priority: str
    active: bool
    text: str = ""
    values: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class Distrust:
    """Samples of ``kind`` (a KIND_NAMES name) are (``active``) or are no longer believed.

    The pipeline then withholds that kind from every estimator but those with
    ``sees_distrusted`` (the one watching the sensor, the displays); the samples
    are still recorded. ``reason`` says why, for the status and the log. An
    estimator may define ``on_distrust(kind, active, since_s)`` to drop what it
    took in since ``since_s`` (the pipeline calls it on every change).
    """

    t_s: float
    kind: str
    active: bool
    reason: str = ""
    since_s: float | None = None  # when the evidence began: samples after it may already be wrong


Output = Publication | Condition | Distrust


class Context(Protocol):
    """What the pipeline lets an estimator see besides its own samples."""

    @property
    def history(self) -> SampleHistory: ...

    def latest(self, topic: str) -> Publication | None:
        """The newest publication on ``topic`` by any estimator, or None."""
        ...


@runtime_checkable
class Estimator(Protocol):
    name: str
    accepts: tuple[type, ...]

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        """Take one sample (of a kind in ``accepts``), return what changed."""
        ...

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        """Data time has reached ``t_s`` (about once a second), for timeouts."""
        ...


class EstimatorBase:
    """Defaults for the optional parts of the protocol."""

    name = "unnamed"
    accepts: tuple[type, ...] = ()
    sees_distrusted = False  # True: also given samples of a kind the pipeline withholds (see Distrust)

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        return ()
