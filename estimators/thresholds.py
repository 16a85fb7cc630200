"""Threshold hysteresis: a condition raised at one value and cleared at another.

A value hovering at a single threshold would raise and clear a condition on
every sample. With two thresholds the condition is raised when the value
reaches ``raise_at`` and only cleared once it has gone back past ``clear_at``,
so noise smaller than the gap between them cannot make it chatter. (The alert
manager adds minimum times on top; this helper is about values.)

``above=True``: the condition is "value high" (e.g. drift over 3 kn):
raised at ``value >= raise_at``, cleared at ``value <= clear_at``, with
``clear_at < raise_at``. ``above=False``: the condition is "value low" (e.g. a
pressure rate below -1.5 hPa/h): raised at ``value <= raise_at``, cleared at
``value >= clear_at``, with ``clear_at > raise_at``.
"""

from __future__ import annotations

import math


class Hysteresis:
    """A two-threshold state machine on one value; units are the caller's."""

    def __init__(self, raise_at: float, clear_at: float, above: bool = True) -> None:
        if not (math.isfinite(raise_at) and math.isfinite(clear_at)):
            raise ValueError(f"thresholds must be finite numbers, got raise_at={raise_at!r}, clear_at={clear_at!r}")
        if above and not clear_at < raise_at:
            raise ValueError(f"for a high-value condition clear_at ({clear_at}) must be below raise_at ({raise_at})")
        if not above and not clear_at > raise_at:
            raise ValueError(f"for a low-value condition clear_at ({clear_at}) must be above raise_at ({raise_at})")
        self.raise_at = raise_at
        self.clear_at = clear_at
        self.above = above
        self.active = False
        self.changed = False  # whether the last update() flipped the state

    def update(self, value: float | None) -> bool:
        """Take one value; return whether the condition holds now.

        A missing or non-finite value leaves the state as it was: no reading is
        not evidence either way.
        """
        self.changed = False
        if value is None or not math.isfinite(value):
            return self.active
        if self.active and self._cleared_by(value):
            self.active, self.changed = False, True
        elif not self.active and self._raised_by(value):
            self.active, self.changed = True, True
        return self.active

    def reset(self) -> None:
        self.active = False
        self.changed = False

    def _raised_by(self, value: float) -> bool:
        return value >= self.raise_at if self.above else value <= self.raise_at

    def _cleared_by(self, value: float) -> bool:
        return value <= self.clear_at if self.above else value >= self.clear_at
