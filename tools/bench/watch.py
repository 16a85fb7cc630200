"""Benchmark: what the watch view and the compass check cost.

``python -m tools.bench.watch [--frames 200]``: the time to build one 80 x 24
frame of the watch view with every line and four alerts (the view redraws
twice a second), and the heading-integrity check's time per sample over the
simulator's stuck-compass hour (10 Hz compass after 2 Hz here, 1 Hz fixes).
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time

from rich.console import Console

from daemon.commands.watch import Screen, WatchModel
from estimators.integrity import HeadingIntegrity
from tools.simulator import scenarios
from tools.simulator.run import simulate

T0 = "2026-05-04T06:30:00.000Z"
STATES = {
    "position": {"lat": 40.9366, "lon": -32.3466, "source": "gnss", "sigma_m": 4.5, "sog_kn": 5.8, "cog_deg": 123.4},
    "instruments": {"heading_deg": 118.2, "heading_age_s": 0.4, "stw_kn": 5.41, "stw_age_s": 0.8, "depth_m": 43.2,
                    "depth_age_s": 3.0, "wind_from_deg": 225.0, "wind_kn": 21.6, "wind_age_s": 1.0},
    "current": {"set_deg": 135.2, "drift_kn": 2.13, "set_sigma_deg": 8.1, "drift_sigma_kn": 0.31, "quality": "valid",
                "stw_scale": 1.05, "heading_offset_deg": -2.5},
    "sea_temperature": {"temp_c": 18.42, "gradient_c_per_nm": 0.42},
    "pressure": {"msl_hpa": 1008.2, "tendency_3h_hpa": -4.1, "rate_hpa_per_h": -1.2, "descriptor": "falling"},
    "status": {"state": "online", "sensors": {}},
}


def frame_ms(frames: int) -> float:
    model = WatchModel()
    for topic, payload in STATES.items():
        model.take(f"offwatch/{topic}", json.dumps({"time": T0, **payload}).encode(), 0.0)
    for i, alert_id in enumerate(("pressure_fall", "gnss_lost", "current_strong", "heading_suspect")):
        model.take(f"offwatch/alerts/{alert_id}", json.dumps({
            "id": alert_id, "priority": "warning", "state": "active", "since": T0,
            "text": "A text of about the usual length, which is cut to fit its one line on the screen. " * 2,
        }).encode(), 0.0)
    screen = Screen(model, broker="mqtt://127.0.0.1:1883")
    screen.connected = screen.details = True
    console = Console(width=80, height=24, file=open(os.devnull, "w"), force_terminal=True)
    times = []
    for _ in range(frames):
        t = time.perf_counter()
        console.print(screen.render(80, 24, 0.0))
        times.append(time.perf_counter() - t)
    return statistics.median(times) * 1000.0


def integrity_us() -> tuple[float, int]:
    run = simulate(scenarios.stuck_compass(), 1)
    est = HeadingIntegrity()
    samples = [s for s in run.samples if any(isinstance(s, k) for k in est.accepts)]
    t = time.perf_counter()
    for s in samples:
        est.step(s, None)
    return (time.perf_counter() - t) / len(samples) * 1e6, len(samples)


def main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=200)
    args = ap.parse_args(argv)
    print(f"watch view: one 80 x 24 frame with four alerts and details: median {frame_ms(args.frames):.1f} ms "
          f"over {args.frames} frames")
    us, n = integrity_us()
    print(f"heading integrity: {us:.1f} µs per sample over {n} samples (the stuck-compass hour)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
