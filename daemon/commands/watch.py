"""``offwatch watch``: a plain terminal view of what the service publishes, for the chart table."""

from __future__ import annotations

import sys
import threading
import time
from typing import Any
from urllib.parse import urlparse

from daemon.errors import InputError

CLEAR = "\x1b[H\x1b[2J"
MAX_VIEW_PAYLOAD_BYTES = 64 * 1024  # the status, the largest payload, is a few KiB


class View:
    """The newest payload per topic, rendered as a few plain lines."""

    def __init__(self, prefix: str) -> None:
        self.prefix = prefix
        self.latest: dict[str, dict[str, Any]] = {}
        self.alerts: dict[str, dict[str, Any]] = {}
        self.events: list[dict[str, Any]] = []
        self.lock = threading.Lock()

    def take(self, topic: str, payload: bytes) -> None:
        from daemon.outlets.mqtt import PayloadRefused, decode_json_payload
        try:  # size and nesting bounded before the parser runs (a 1000-deep [[[ raised RecursionError)
            data = decode_json_payload(payload, MAX_VIEW_PAYLOAD_BYTES)
        except PayloadRefused:
            return
        if not isinstance(data, dict):
            return
        rel = topic[len(self.prefix) + 1:] if topic.startswith(self.prefix + "/") else topic
        with self.lock:
            if rel.startswith("alerts/"):
                self.alerts[rel[7:]] = data
            elif rel == "events":
                self.events = (self.events + [data])[-5:]
            else:
                self.latest[rel] = data

    def render(self) -> str:
        with self.lock:
            return "\n".join(self._lines())

    def _lines(self) -> list[str]:
        g = lambda topic, key, fmt="{}": _fmt(self.latest.get(topic, {}).get(key), fmt)  # noqa: E731
        st = self.latest.get("status", {})
        out = [f"offwatch  {st.get('time', '--')}  {st.get('state', 'no status yet')}", ""]
        out.append(f"Position   {g('position', 'lat', '{:.5f}')} {g('position', 'lon', '{:.5f}')}"
                   f"  ({g('position', 'source')}, ±{g('position', 'sigma_m', '{:.0f}')} m)")
        out.append(f"Current    set {g('current', 'set_deg', '{:03.0f}')}° drift {g('current', 'drift_kn', '{:.1f}')} kn"
                   f"  (±{g('current', 'set_sigma_deg', '{:.0f}')}°, ±{g('current', 'drift_sigma_kn', '{:.1f}')} kn,"
                   f" {g('current', 'quality')})")
        out.append(f"Log/compass  log ×{g('current', 'stw_scale', '{:.3f}')}  compass {g('current', 'heading_offset_deg', '{:+.1f}')}°")
        out.append(f"Sea        {g('sea_temperature', 'temp_c', '{:.1f}')} °C, {g('sea_temperature', 'gradient_c_per_nm', '{:+.2f}')} °C/nm")
        out.append(f"Barometer  {g('pressure', 'msl_hpa', '{:.1f}')} hPa, 3 h {g('pressure', 'tendency_3h_hpa', '{:+.1f}')} hPa,"
                   f" {g('pressure', 'descriptor')}")
        if "sea_state" in self.latest:
            out.append(f"Wind/current  opposing {g('sea_state', 'opposing_current_kn', '{:.1f}')} kn,"
                       f" steepness ×{g('sea_state', 'steepness_factor', '{:.1f}')}")
        out += ["", "Alerts"]
        shown = [a for a in self.alerts.values() if a.get("state") != "cleared"]
        out += [f"  {a.get('priority', ''):8} {a.get('id', ''):20} {a.get('state', '')}  {a.get('text', '')}" for a in shown] or ["  none"]
        if self.events:
            out += ["", "Events"] + [f"  {e.get('time', '')} {e.get('kind', '')}" for e in self.events]
        out += ["", "Advisory only, not for navigation."]
        return out


def _fmt(v: Any, fmt: str) -> str:
    if v is None:
        return "--"
    try:
        return fmt.format(v)
    except (ValueError, TypeError):
        return str(v)


def watch_command(args) -> int:
    import paho.mqtt.client as mqtt

    u = urlparse(args.mqtt)
    view = View(args.prefix)
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2)

    def on_message(c, userdata, msg):
        try:
            view.take(msg.topic, msg.payload)
        except Exception:  # a paho callback must never raise
            pass

    client.on_message = on_message
    client.on_connect = lambda c, u_, f, rc, p=None: c.subscribe(f"{args.prefix}/#")
    try:
        client.connect(u.hostname or "127.0.0.1", u.port or 1883)
    except OSError as e:
        raise InputError(f"cannot reach the broker at {args.mqtt}: {e}") from None
    client.loop_start()
    try:
        if args.once:
            time.sleep(2.0)
            print(view.render())
            return 0
        while True:
            sys.stdout.write((CLEAR if sys.stdout.isatty() else "") + view.render() + "\n")
            sys.stdout.flush()
            time.sleep(1.0)
    finally:
        client.loop_stop()
        client.disconnect()
