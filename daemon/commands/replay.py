"""``offwatch replay``: recorded files through the very same pipeline as ``run``."""

from __future__ import annotations

import gzip
import logging
import sys
import time
from collections.abc import Sequence
from pathlib import Path

from daemon.core.assembly import build
from daemon.core.config import Config, client_id_for, load_config
from daemon.errors import ConfigError, InputError
from daemon.outlets.jsonl import JsonlSink
from daemon.core.readings import Sink
from daemon.intake.replayfiles import ProgressBar, detect_format, iter_replay, source_names
from daemon.commands.summary import SummarySink

log = logging.getLogger(__name__)


EXIT_NOT_ALL_KEPT = 3         # the replay ran to its end, but not all it was asked to keep or deliver was
MQTT_WAIT_S = 15.0            # at the end, how long a replay waits for the broker to take what is queued


def open_outputs(cfg: Config, *, jsonl: str | None, record: str | None, mqtt_url: str | None,
                 pipeline_hooks: dict, mqtt_wait_s: float = MQTT_WAIT_S) -> list[Sink]:
    """The sinks a replay asked for; MQTT only when a broker is configured or given."""
    sinks: list[Sink] = []
    if jsonl:
        sinks.append(JsonlSink(jsonl))
    if record:
        from daemon.outlets.recording.recorder import Recorder
        rec = Recorder.open_file(record)
        rec.record_config(cfg.effective())
        sinks.append(rec)
    if cfg.section("nmea_out").enabled:
        from daemon.outlets.nmea_tcp import NmeaTcpSink
        sinks.append(NmeaTcpSink(cfg.section("nmea_out")))
    url = mqtt_url or cfg.mqtt.url
    if url:
        from daemon.outlets.mqtt import MqttSink
        sinks.append(MqttSink.from_config(client_id_for(cfg.mqtt, "replay"), url=url, state_dir=None,
                                          on_ack=lambda i, reply: pipeline_hooks["ack"](i, reply),
                                          close_timeout_s=mqtt_wait_s))
    return sinks


def run_replay(paths: Sequence[str], cfg: Config, *, jsonl: str | None = None, record: str | None = None,
               mqtt_url: str | None = None, speed: float | None = None, progress: bool = True,
               extra_sinks: Sequence[Sink] = (), mqtt_wait_s: float = MQTT_WAIT_S) -> SummarySink:
    for p in paths:
        _check_path(Path(p))
    hooks: dict = {}
    summary = SummarySink()
    outputs = open_outputs(cfg, jsonl=jsonl, record=record, mqtt_url=mqtt_url, pipeline_hooks=hooks,
                           mqtt_wait_s=mqtt_wait_s)
    sinks = [summary, *extra_sinks, *outputs]
    parts = build(cfg, sinks, live=False)
    pipe = parts.pipeline
    summary.counters = parts.counters
    hooks["ack"] = pipe.acknowledge
    bar = ProgressBar() if progress and sys.stderr.isatty() else None
    pacer = _Pacer(speed) if speed else None
    try:
        for item in iter_replay(list(paths), parts.make_ingest, progress=bar.update if bar else None):
            if pacer is not None:
                pacer.wait_for(item.t_s if hasattr(item, "text") else item.sample.t_s)
            pipe.feed(item)
    finally:
        if bar is not None:
            bar.close()
        pipe.close()
        for out in outputs:
            summary.take_output_account(out)
    _check_sentences_seen(paths, parts.counters)
    return summary


def _check_path(path: Path) -> None:
    """A replay file that is missing, a directory or empty is an error that says which."""
    if path.is_dir():
        raise InputError(f"replay file {path} is a directory: name the files in it (e.g. {path}/*.nmea.gz)")
    if not path.exists():
        raise InputError(f"replay file {path} not found")
    if not path.is_file():
        raise InputError(f"replay file {path} is not a regular file")
    if path.stat().st_size == 0:
        raise InputError(f"replay file {path} is empty")


# line outcomes that show a real NMEA 0183 sentence (daemon/intake/counters.py)
RECOGNISED = ("good", "bad_checksum", "unknown", "proprietary", "ais", "implausible")


def _check_sentences_seen(paths: Sequence[str], counters) -> None:
    """A text file in which not one line was an NMEA 0183 sentence is an error, not a quiet summary."""
    totals_by_source = {src: d.get("totals", {}) for src, d in counters.snapshot().items()}
    for path, source in zip(paths, source_names(paths)):
        if detect_format(path) == "sqlite":
            continue  # a recording's lines carry their own source names
        totals = totals_by_source.get(source, {})
        if sum(totals.get(k, 0) for k in RECOGNISED):
            continue  # at least one real sentence, however damaged the rest
        if _looks_binary(Path(path)):
            raise InputError(f"replay file {path} holds binary data, not NMEA 0183 text")
        if not sum(v for k, v in totals.items() if k not in ("not_sentence", "empty")):
            raise InputError(f"replay file {path} holds not one NMEA 0183 sentence "
                             f"(lines that start with $ or !, e.g. $GPRMC,...)")


def _looks_binary(path: Path, probe: int = 4096) -> bool:
    """NUL bytes or mostly non-text in the first bytes (decompressed when gzip)."""
    try:
        opener = gzip.open if detect_format(path) == "gzip" else open
        with opener(path, "rb") as f:
            head = f.read(probe)
    except (OSError, EOFError):
        return True
    if not head:
        return False
    text = sum(1 for b in head if b in (9, 10, 13) or 32 <= b < 127)
    return b"\0" in head or text < 0.7 * len(head)


class _Pacer:
    """Sleeps so data time passes ``speed`` times faster than the wall clock.

    Each item waits until it is due (it used to sleep at most 1 s and then go
    early, so a slow pace ran ahead). A jump of more than ``MAX_GAP_S`` in the
    data (files hours apart) is crossed in one wall second, not waited out.
    """

    MAX_GAP_S = 600.0  # as the pipeline's MAX_TICKS_PER_GAP

    def __init__(self, speed: float) -> None:
        self.speed = speed
        self.t0_data: float | None = None
        self.t0_wall = 0.0
        self.t_prev = 0.0

    def wait_for(self, t_s: float) -> None:
        now = time.monotonic()
        if self.t0_data is None or t_s - self.t_prev > self.MAX_GAP_S:
            self.t0_data, self.t0_wall, self.t_prev = t_s, now + (1.0 if self.t0_data is not None else 0.0), t_s
        self.t_prev = max(self.t_prev, t_s)
        delay = self.t0_wall + (t_s - self.t0_data) / self.speed - now
        if delay > 0:
            time.sleep(delay)


def replay_command(args) -> int:
    if args.speed is not None and not args.speed > 0:
        raise ConfigError(f"--speed {args.speed}: expected a number above 0 (times real time), e.g. --speed 10")
    if args.mqtt_wait is not None and not 0 <= args.mqtt_wait <= 3600:
        raise ConfigError(f"--mqtt-wait {args.mqtt_wait}: expected seconds from 0 to 3600, e.g. --mqtt-wait 15")
    cfg = load_config(args.config)
    summary = run_replay(args.files, cfg, jsonl=args.jsonl, record=args.record, mqtt_url=args.mqtt,
                         speed=args.speed, mqtt_wait_s=MQTT_WAIT_S if args.mqtt_wait is None else args.mqtt_wait)
    if not args.quiet:
        print("\n".join(summary.lines()))
    if summary.shortfalls:
        # said even with --quiet: what was asked for and not done is never silent
        for line in summary.shortfalls:
            print(f"offwatch: {line}", file=sys.stderr)
        return EXIT_NOT_ALL_KEPT
    return 0
