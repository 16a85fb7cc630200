"""``offwatch run``: the always-on service under systemd.

One reading loop: chunks from every live source (one supervisor thread each)
arrive on one bounded queue; each source's Ingest frames and parses them; the
pipeline steps the estimators; MQTT and the recorder only ever enqueue, so a
dead broker or a slow SD card never delays an input. The loop also ticks the
pipeline with the wall clock once a second (a silent feed is noticed even when
nothing at all arrives), pings the systemd watchdog only while the loop and
the MQTT thread are alive, and saves the learnt calibration and the alert
states in the state directory. The recorder's health is published in the
status and raises ``recording_fault`` (a caution) while lines are being lost.
"""

from __future__ import annotations

import logging
import math
import queue
import signal
import threading
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from daemon.outlets import sdnotify
from daemon.core.calibration_store import load_calibration, save_calibration
from daemon.core.config import Config, client_id_for, load_config
from daemon.errors import ConfigError, OffwatchError
from daemon.core.statefiles import read_json, write_json_atomic
from daemon.core.payloads import iso_utc
from estimators.base import Condition

log = logging.getLogger(__name__)

CALIBRATION_SAVE_EVERY_S = 600.0
ALERTS_FILE = "alerts.json"
QUEUE_SIZE = 10000
DRAIN_SLICE_S = 0.5  # longest the loop feeds queued input before it ticks and pings again
# The loop takes what the inputs queued this often: one wake for the few lines of a tenth of a second
# rather than one per line (data time comes with each line, so the pause changes no figure)
POLL_S = 0.1


class Service:
    def __init__(self, cfg: Config, mqtt_url: str | None = None) -> None:
        self.cfg = cfg
        self.stop = threading.Event()
        self.state_dir = cfg.state_dir()
        self.state_dir.mkdir(parents=True, exist_ok=True)
        self.chunks: queue.Queue = queue.Queue(maxsize=QUEUE_SIZE)
        self.notifier = sdnotify.Notifier()
        self.mqtt = None
        self.recorder = None
        self.nmea_out = None
        self._open_outputs(mqtt_url or cfg.mqtt.url)
        self.alerts_changed = _AlertWatch()
        self.recording_watch = RecordingWatch()
        sinks = [s for s in (self.recorder, self.mqtt, self.nmea_out, self.alerts_changed) if s is not None]
        from daemon.core.assembly import build  # the estimators and numpy: only once the config is known good
        self.parts = build(cfg, sinks, live=True, calibration=load_calibration(self.state_dir),
                           alert_snapshot=read_json(self.state_dir / ALERTS_FILE),
                           extra_status=self._health)
        self.ingests = {name: self.parts.make_ingest(name) for name in cfg.inputs}
        self.source_threads: list = []

    def _open_outputs(self, url: str) -> None:
        from daemon.outlets.recording.recorder import Recorder
        self.recorder = Recorder.open_passage(self.cfg.section("recording"), self.state_dir / "recordings")
        self.recorder.record_config(self.cfg.effective())
        if self.cfg.section("nmea_out").enabled:
            from daemon.outlets.nmea_tcp import NmeaTcpSink
            self.nmea_out = NmeaTcpSink(self.cfg.section("nmea_out"))
        if url:
            from daemon.outlets.mqtt import MqttSink
            self.mqtt = MqttSink.from_config(client_id_for(self.cfg.mqtt, "run"), url=url, state_dir=self.state_dir,
                                             on_ack=lambda i, reply: self.parts.pipeline.acknowledge(i, reply),
                                             on_swell=lambda b: self.parts.pipeline.report_swell(b))

    def _judge_recording(self) -> None:
        """``recording_fault`` (a caution) while commits fail, and for a while after lines were lost."""
        pipe = self.parts.pipeline
        if pipe.now_s is None or self.recorder is None:
            return
        cond = self.recording_watch.judge(self.recorder.stats, pipe.now_s, time.monotonic())
        if cond is not None:
            pipe.condition(cond)

    def _health(self) -> dict:
        out = {"sources": {h.name: h.snapshot() for h in getattr(self, "health", [])}}
        if self.recorder is not None:
            out["recording"] = recording_health(self.recorder.stats)
        if self.mqtt is not None:
            out["mqtt"] = self.mqtt.snapshot()
        if self.nmea_out is not None:
            out["nmea_out"] = self.nmea_out.snapshot()
        return out

    def run(self) -> int:
        from daemon.intake.sources import start_sources
        self.source_threads, self.health = start_sources(self.cfg.inputs, self.chunks, self.stop)
        pipe = self.parts.pipeline
        pipe.republish_alerts(time.time())
        self.notifier.ready()
        log.info("offwatch running: %d inputs, state in %s", len(self.cfg.inputs), self.state_dir)
        next_tick = time.monotonic()
        next_save = time.monotonic() + CALIBRATION_SAVE_EVERY_S
        clean = False
        try:
            while not self.stop.is_set():
                self._drain()
                now = time.monotonic()
                if now >= next_tick:
                    pipe.tick(time.time())
                    self._judge_recording()
                    self._watchdog()
                    if self.alerts_changed.take():
                        self._save_alerts()
                    next_tick = now + 1.0
                if now >= next_save:
                    self._save_state()
                    next_save = now + CALIBRATION_SAVE_EVERY_S
            clean = True
        finally:
            self.notifier.stopping()
            self.stop.set()
            for ingest in self.ingests.values():
                pipe.feed_all(ingest.flush())  # a line cut off by the stop ends here
            self._save_state()
            pipe.close()
            if clean:
                log.info("offwatch stopped cleanly")
            else:
                log.error("offwatch stopped after an error (traceback below); systemd restarts it")
        return 0

    def _drain(self) -> None:
        """After POLL_S (or a stop request), feed the queued chunks for at most DRAIN_SLICE_S, so a
        flooding input cannot starve the tick, the watchdog or a stop (the bounded queue then drops
        and counts)."""
        if self.stop.wait(POLL_S):
            return
        pipe = self.parts.pipeline
        until = time.monotonic() + DRAIN_SLICE_S
        while time.monotonic() < until and not self.stop.is_set():
            try:
                chunk = self.chunks.get_nowait()
            except queue.Empty:
                return
            ingest = self.ingests.get(chunk.source)
            if ingest is not None:
                pipe.feed_all(ingest.feed(chunk.data, chunk.recv_utc))

    def _watchdog(self) -> None:
        """Ping only while everything that must run does: a hung part gets us restarted."""
        if self.mqtt is not None and not self.mqtt.healthy():
            log.error("MQTT network thread is not healthy; withholding the watchdog ping")
            return
        self.notifier.watchdog()
        cur = self.parts.pipeline.ctx.latest("current")
        self.notifier.status(status_text(cur.payload if cur is not None else None,
                                         self.parts.pipeline.alerts.listed()))

    def _save_state(self) -> None:
        try:
            save_calibration(self.state_dir, self.parts.current.calibration(), time.time())
        except OffwatchError as e:
            log.error("%s", e)
        self._save_alerts()

    def _save_alerts(self) -> None:
        """The listed alerts, so a restart shows them again (saved at most once a second)."""
        try:
            write_json_atomic(self.state_dir / ALERTS_FILE, self.parts.pipeline.alerts.snapshot())
        except OSError as e:
            log.error("cannot save the alert states in %s: %s", self.state_dir, e)


def status_text(current: dict | None, alerts: Sequence[Mapping] = ()) -> str:
    """The one line for ``systemctl status``: the trouble first, when there is any, then the current.

    ``alerts`` are the listed alerts (payloads); a current not yet estimable (fields None) says so.
    """
    trouble = _trouble_words(alerts)
    calm = _current_words(current)
    return f"{trouble} | {calm}" if trouble else calm


_STATE_RANK = {"active": 0, "acknowledged": 1, "rectified": 2}
_PRIORITY_RANK = {"alarm": 0, "warning": 1, "caution": 2}
STATUS_ALERTS_SHOWN = 3


def _trouble_words(alerts: Sequence[Mapping]) -> str:
    """``WARNING gnss_lost, CAUTION sensor_stale, +1 more``: the most urgent listed alerts first."""
    listed = [a for a in alerts if isinstance(a, Mapping) and isinstance(a.get("state"), str)
              and isinstance(a.get("priority"), str) and a["state"] in _STATE_RANK and a["priority"] in _PRIORITY_RANK]
    listed.sort(key=lambda a: (_STATE_RANK[a["state"]], _PRIORITY_RANK[a["priority"]], str(a.get("id"))))
    words = []
    for a in listed[:STATUS_ALERTS_SHOWN]:
        state = "" if a["state"] == "active" else f" ({a['state']})"
        words.append(f"{a['priority'].upper()} {a.get('id')}{state}")
    if len(listed) > STATUS_ALERTS_SHOWN:
        words.append(f"+{len(listed) - STATUS_ALERTS_SHOWN} more")
    return ", ".join(words)


def _current_words(current: dict | None) -> str:
    if not current:
        return "running"
    drift, set_deg = current.get("drift_kn"), current.get("set_deg")
    if not isinstance(drift, (int, float)) or not isinstance(set_deg, (int, float)):
        return f"running; current {current.get('quality') or 'unavailable'}"
    return f"current {drift:.1f} kn toward {set_deg:03.0f}°, {current.get('quality')}"


RECORDING_LOSS_HOLD_S = 60.0  # recording_fault stays raised this long after the latest loss


def recording_health(stats: Any) -> dict:
    """The recorder's health for the status topic."""
    return {"path": stats.path, "ok": not stats.failing, "lost_lines": stats.lost_raw,
            "lost_messages": stats.lost_messages, "gaps": stats.gaps, "gaps_not_yet_marked": stats.gaps_unwritten,
            "write_errors": stats.write_errors, "queue_dropped": stats.dropped,
            "loss_from": iso_utc(stats.loss_t_first) if stats.loss_t_first is not None else None,
            "loss_to": iso_utc(stats.loss_t_last) if stats.loss_t_last is not None else None,
            "last_error": stats.last_error or None}


class RecordingWatch:
    """Judges the ``recording_fault`` condition from the recorder's stats, once a second."""

    def __init__(self, hold_s: float = RECORDING_LOSS_HOLD_S) -> None:
        self.hold_s = hold_s
        self._lost_seen = 0
        self._last_loss_mono = -math.inf
        self._active = False

    def judge(self, stats: Any, t_s: float, mono: float) -> Condition | None:
        """The condition when it holds, and once when it stops holding; None otherwise."""
        lost = stats.lost_raw + stats.lost_messages
        if lost > self._lost_seen:
            self._lost_seen, self._last_loss_mono = lost, mono
        active = bool(stats.failing) or mono - self._last_loss_mono < self.hold_s
        if not active and not self._active:
            return None
        self._active = active
        since = f" since {iso_utc(stats.loss_t_first)[11:16]} UTC" if stats.loss_t_first is not None else ""
        why = stats.last_error.split(": ")[-1] if stats.last_error else "the writer fell behind"
        text = (f"Recording: {lost} lines and messages not kept{since} ({why}); the gap is marked in the "
                "recording. Check the free space on this computer's disk.")
        return Condition(t_s, "recording_fault", "caution", active, text,
                         {"lost_lines": stats.lost_raw, "lost_messages": stats.lost_messages, "gaps": stats.gaps})


class _AlertWatch:
    """A sink that only notes that an alert changed, so the loop saves the alert states."""

    def __init__(self) -> None:
        self._changed = False

    def raw(self, line) -> None:
        pass

    def message(self, msg) -> None:
        if msg.kind == "alert":
            self._changed = True

    def close(self) -> None:
        pass

    def take(self) -> bool:
        changed, self._changed = self._changed, False
        return changed


def run_command(args) -> int:
    cfg = load_config(args.config)
    if not cfg.inputs:
        raise ConfigError(f"{cfg.path}: no [inputs.NAME] table: add one, e.g. [inputs.gps] kind = \"serial\" "
                          f"device = \"/dev/serial/by-id/usb-...\" (the stable name: ls -l /dev/serial/by-id/)")
    service = Service(cfg, mqtt_url=args.mqtt)

    def on_signal(signum, frame):
        log.info("signal %d: stopping", signum)
        service.stop.set()

    signal.signal(signal.SIGTERM, on_signal)
    signal.signal(signal.SIGINT, on_signal)
    return service.run()


__all__ = ["Service", "run_command", "Path"]
