"""What the fuzzers drive: the way in as the service runs it, and the config loader."""

from __future__ import annotations

import gzip
import json
import random
from pathlib import Path

from daemon.core.config import load_config
from daemon.errors import ConfigError
from daemon.intake.counters import Counters
from daemon.intake.ingest import Ingest
from tools.fuzz.mutate import stream

T_LIVE = 1777867200.0  # 2026-05-04T04:00:00Z


class _Variation:
    """A variation provider that always knows one (so magnetic paths run too)."""

    def note_sentence_variation(self, east_deg: float, t_s: float) -> None:
        pass

    def note_position(self, lat_deg: float, lon_deg: float, t_s: float) -> None:
        pass

    def east_deg(self, t_s: float) -> float | None:
        return -9.5


def seed_lines(paths: list[Path], per_file: int = 5000) -> list[str]:
    """Up to ``per_file`` lines of each file (plain or gzip), as text."""
    lines: list[str] = []
    for p in paths:
        opener = gzip.open if p.suffix == ".gz" else open
        try:
            with opener(p, "rb") as f:
                raw = f.read()
        except OSError:
            continue
        text = raw.decode("ascii", errors="replace").replace("\r", "\n").split("\n")
        lines += [x for x in text if x.strip()][:per_file]
    return lines


def run_ingest(rng: random.Random, seeds: list[str], n: int, live: bool) -> int:
    """``n`` mutated lines through one Ingest (random chunking), counters and their JSON; items out."""
    lines = stream(rng, seeds, n)
    data = "".join(x + rng.choice(("\r\n", "\n", "\r")) for x in lines).encode("utf-8", errors="replace")
    counters = Counters()
    ing = Ingest("fuzz", counters=counters, variation=_Variation(), live=live,
                 allow_no_checksum=rng.random() < 0.2, heading_sensor=rng.choice(("auto", "magnetic", "true")))
    out = 0
    i = 0
    t = T_LIVE
    while i < len(data):
        step = rng.choice((1, 7, 82, 4096, 65536))
        items = ing.feed(data[i:i + step], t if live else None)
        counters.take(items)
        out += len(items)
        i += step
        t += 0.01
    items = ing.flush()
    counters.take(items)
    json.dumps(counters.snapshot())
    return out + len(items)


_TOML_PIECES = (
    "[installation]\n", "[inputs.gps]\n", "[mqtt]\n", "[alerts]\n", "[current]\n", "[pressure]\n", "[priority]\n",
    "kind = \"udp\"\n", "kind = \"serial\"\n", "port = 70000\n", "port = -1\n", "device = \"/dev/null\"\n",
    "height_m = 1e400\n", "height_m = \"ten\"\n", "heading_sensor = \"sideways\"\n", "url = \"mqtt://[::1\"\n",
    "gate_probability = 2.0\n", "x = [[[[[[[[1]]]]]]]]\n", "fix = [\"gps\", \"nothing\"]\n", "= 1\n",
    "a.b.c = 1\n", "[[inputs]]\n", "not_before = \"2019-13-45\"\n", "\"\\u0000\" = 1\n", "k = 1979-05-27T07:32:00Z\n",
)


def fuzz_config_text(rng: random.Random, path: Path) -> str:
    """A config file pieced together at random; loading it either works or raises ConfigError."""
    text = "".join(rng.choice(_TOML_PIECES) for _ in range(rng.randrange(1, 12)))
    path.write_text(text, encoding="utf-8")
    try:
        load_config(path)
        return "ok"
    except ConfigError:
        return "config_error"
