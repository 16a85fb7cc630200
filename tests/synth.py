"""A small seeded sensor model for the current-estimator tests (no tests here).

The boat follows legs of constant true heading at a constant true speed through
the water; the current walks (or holds); the compass reads the true heading
minus the offset plus white noise; the log reads true STW / scale plus noise;
the GNSS gives ground velocity (true water velocity + current) plus white
noise per axis. One log and one fix sample per second, ``heading_hz`` headings
(the newest 0.4 s before the fix; above one a second each is the heading at
its own time, so in a turn the mean heading lags the fix's course); optionally the boat sheds speed in a turn (``turn_speed_loss``,
recovering with a 20-s time constant), as a sailing boat does.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from estimators.angles import from_east_north, to_east_north, wrap_360
from estimators.samples import Fix, Heading, WaterSpeed

T0 = 1_780_000_000.0  # an arbitrary data time (2026)


@dataclass
class Synth:
    samples: list = field(default_factory=list)
    t: list = field(default_factory=list)            # truth times (fix times)
    current: list = field(default_factory=list)      # truth (east, north) kn at each fix
    k: float = 1.0
    offset_deg: float = 0.0


def synth_passage(seed: int, duration_s: int, legs: list[tuple[float, float]], *, stw_kn: float = 6.0,
                  current_en: tuple[float, float] = (0.8, -0.5), walk_kn_per_sqrt_h: float = 0.0,
                  k: float = 1.06, offset_deg: float = 3.0, gnss_sigma: float = 0.1, log_sigma: float = 0.1,
                  heading_sigma_deg: float = 1.5, turn_rate_deg_s: float = 10.0,
                  fix_gap: tuple[float, float] | None = None, log_override=None,
                  current_steps: tuple[tuple[float, tuple[float, float]], ...] = (),
                  heading_hz: int = 1, turn_speed_loss: float = 0.0,
                  current_slope_kn_per_h: tuple[float, float] = (0.0, 0.0), slope_from_s: int = 0) -> Synth:
    """``legs``: (start time s from T0, true heading deg), sorted. ``log_override(t_rel, reading) -> reading``;
    ``current_steps``: (time s from T0, new (east, north)) where the current jumps; ``current_slope_kn_per_h``:
    a steady change of the current (east, north), on top of its walk, from ``slope_from_s`` s on (a ramp)."""
    rng = np.random.default_rng(seed)
    out = Synth(k=k, offset_deg=offset_deg)
    ce, cn = current_en
    q = walk_kn_per_sqrt_h / math.sqrt(3600.0)
    hdg = legs[0][1]
    stw = stw_kn
    for i in range(1, duration_s + 1):
        target = [h for (ts, h) in legs if ts <= i][-1]
        diff = (target - hdg + 180.0) % 360.0 - 180.0
        prev_hdg = hdg
        hdg = wrap_360(hdg + max(-turn_rate_deg_s, min(turn_rate_deg_s, diff)))
        target_stw = stw_kn * (1.0 - turn_speed_loss) if abs(diff) > 20.0 else stw_kn
        stw += (target_stw - stw) * (1.0 - math.exp(-1.0 / 20.0))          # first-order speed, 20 s
        for ts, new in current_steps:
            if i == ts:
                ce, cn = new
        ramping = i >= slope_from_s  # from the start by default, as before
        ce += q * rng.standard_normal() + (current_slope_kn_per_h[0] / 3600.0 if ramping else 0.0)
        cn += q * rng.standard_normal() + (current_slope_kn_per_h[1] / 3600.0 if ramping else 0.0)
        t = T0 + i
        reading = stw / k + log_sigma * rng.standard_normal()
        if log_override is not None:
            reading = log_override(i, reading)
        for j in reversed(range(heading_hz)):
            lag = 0.4 + j / heading_hz                                         # seconds before the fix
            # the heading at the sample's time (one a second: the fix's heading, the original model)
            h_then = hdg if heading_hz == 1 else prev_hdg + (1.0 - lag) * ((hdg - prev_hdg + 180.0) % 360.0 - 180.0)
            out.samples.append(Heading(t - lag, wrap_360(h_then - offset_deg + heading_sigma_deg * rng.standard_normal())))
        out.samples.append(WaterSpeed(t - 0.3, max(0.0, reading)))
        we, wn = to_east_north(stw, hdg)
        ge = we + ce + gnss_sigma * rng.standard_normal()
        gn = wn + cn + gnss_sigma * rng.standard_normal()
        sog, cog = from_east_north(ge, gn)
        out.t.append(t)
        out.current.append((ce, cn))
        if fix_gap is not None and fix_gap[0] <= i < fix_gap[1]:
            continue
        out.samples.append(Fix(t, 50.0, -4.0, sog, cog))
    return out


def tacking_legs(duration_s: int, leg_s: int = 300, a: float = 40.0, b: float = 130.0) -> list[tuple[float, float]]:
    return [(float(t), a if (t // leg_s) % 2 == 0 else b) for t in range(0, duration_s + 1, leg_s)]
