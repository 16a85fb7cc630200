"""``offwatch demo``: the demo passage end to end, through a real broker, with a display listening.

Uses the broker at --mqtt (default 127.0.0.1:1883) when one answers; otherwise
starts an embedded pure-Python broker on a free loopback port and says so. The
service itself (``run``) never starts a broker.

It publishes under a prefix of its own (``offwatch-demo/`` unless ``--prefix``
says otherwise), never the service's ``offwatch/``: its retained positions and
warnings are invented, and a boat's displays must not show them as the boat's.
"""

from __future__ import annotations

import dataclasses
import json
import threading
import time
from collections import Counter
from pathlib import Path
from urllib.parse import urlparse

from daemon.core.config import load_config
from daemon.errors import ConfigError, InputError

RECORDED = Path(__file__).resolve().parents[2] / "recorded_runs"
DEMO_PREFIX = "offwatch-demo"


def demo_prefix(given: str | None) -> str:
    """The demo's topic prefix: ``given`` when it is a usable MQTT topic prefix, else an error that says why."""
    prefix = (DEMO_PREFIX if given is None else given).strip().rstrip("/")
    if not prefix or any(c in prefix for c in "+#\0") or len(prefix) > 200 or not prefix.isprintable():
        raise ConfigError(f"--prefix {given!r}: expected a topic prefix without + or #, e.g. --prefix {DEMO_PREFIX}")
    return prefix


def demo_files() -> tuple[list[str], str | None]:
    """The demo passage and its config, from recorded_runs/."""
    files = sorted(str(p) for p in RECORDED.glob("*.nmea.gz"))
    if not files:
        raise InputError(f"no demo passage (*.nmea.gz) in {RECORDED}")
    cfg = RECORDED / "demo.toml"
    return files[:1], str(cfg) if cfg.exists() else None


class Display:
    """A stand-in for a display app: subscribes to <prefix>/# and counts what arrives."""

    def __init__(self, host: str, port: int, prefix: str) -> None:
        import paho.mqtt.client as mqtt

        self.topics: Counter[str] = Counter()
        self._lock = threading.Lock()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"offwatch-demo-display-{port}")
        self.client.on_message = self._on_message
        self.client.on_connect = lambda c, u, f, rc, p=None: c.subscribe(f"{prefix}/#", qos=1)
        self.client.connect(host, port)
        self.client.loop_start()

    def _on_message(self, client, userdata, msg) -> None:
        try:
            json.loads(msg.payload)
            with self._lock:
                self.topics[msg.topic] += 1
        except Exception:  # a paho callback must never raise
            pass

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()


def demo_command(args) -> int:
    from daemon.outlets.broker import EmbeddedBroker, broker_answers
    from daemon.commands.replay import run_replay

    files, cfg_path = demo_files()
    cfg = load_config(cfg_path)
    prefix = demo_prefix(getattr(args, "prefix", None))
    cfg = dataclasses.replace(cfg, mqtt=dataclasses.replace(cfg.mqtt, prefix=prefix))
    url = args.mqtt or "mqtt://127.0.0.1:1883"
    u = urlparse(url)
    host, port = u.hostname or "127.0.0.1", u.port or 1883
    broker = None
    if broker_answers(host, port):
        print(f"Using the MQTT broker at {host}:{port}.")
    else:
        host = "127.0.0.1"
        broker = EmbeddedBroker(host, 0)  # 0: the broker binds a free port itself (no race for it)
        broker.start()
        port = broker.port
        url = f"mqtt://{host}:{port}"
        print(f"No broker answered; started an embedded demo broker on {host}:{port}.")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    record = out / "demo.sqlite"
    if record.exists():
        record.unlink()
    display = Display(host, port, cfg.mqtt.prefix)
    print(f"Publishing under {prefix}/, not offwatch/: the demo's positions and alerts are invented, and a "
          f"boat's displays listening to offwatch/ must not show them (choose another with --prefix).")
    try:
        print(f"Replaying {Path(files[0]).name} ...")
        t0 = time.monotonic()
        summary = run_replay(files, cfg, jsonl=str(out / "demo.jsonl"), record=str(record), mqtt_url=url)
        elapsed = time.monotonic() - t0
        time.sleep(1.0)  # let the last messages reach the display
    finally:
        display.close()
        if broker is not None:
            broker.stop()
    print("\n".join(summary.lines()))
    received = sum(display.topics.values())
    print(f"A display subscribed to {cfg.mqtt.prefix}/# received {received} messages on {len(display.topics)} topics.")
    print(f"Replayed in {elapsed:.1f} s. Output: {out / 'demo.jsonl'} and {record}.")
    print("Advisory only, not for navigation: offwatch's cautions never replace official forecasts, charts or seamanship.")
    return 0
