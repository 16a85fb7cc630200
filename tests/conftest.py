"""Shared fixtures: a Mosquitto broker of the test's own on a free loopback port."""

from __future__ import annotations

import os

import getpass
import shutil
import signal
import socket
import subprocess
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from daemon.outlets.broker import broker_answers

MOSQUITTO = shutil.which("mosquitto") or "/usr/sbin/mosquitto"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Mosquitto:
    """A Mosquitto process on 127.0.0.1:<port> with a config in a temp directory.

    Unpacks as ``host, port = mosquitto``; ``restart()`` comes back on the same
    port. Persistence is on (in the temp directory), so persistent sessions and
    their queued QoS-1 messages survive a restart, as on a real boat.
    """

    def __init__(self, workdir: Path, listener_conf: str = "", persistence: bool = True) -> None:
        """``listener_conf``: lines for the listener (e.g. cafile/certfile/keyfile for TLS);
        ``persistence=False``: a restart forgets retained messages and sessions (Mosquitto's default)."""
        self.host = "127.0.0.1"
        self.port = free_port()
        self.workdir = workdir
        self.tls = "certfile" in listener_conf
        self.conf = workdir / "mosquitto.conf"
        self.log = workdir / "mosquitto.log"
        self.conf.write_text(
            f"listener {self.port} {self.host}\n"
            f"{listener_conf}"
            # started as root, mosquitto would drop to its own user, who cannot read the temp dir
            f"user {getpass.getuser()}\n"
            "allow_anonymous true\n"
            f"persistence {'true' if persistence else 'false'}\n"
            "autosave_interval 1\n"
            f"persistence_location {workdir}/\n"
            f"log_dest file {self.log}\n"
            "log_type all\n")
        self.proc: subprocess.Popen | None = None

    def __iter__(self):
        return iter((self.host, self.port))

    def start(self, timeout_s: float = 10.0) -> None:
        self.proc = subprocess.Popen([MOSQUITTO, "-c", str(self.conf)],
                                     stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        deadline = time.monotonic() + timeout_s
        while not self._answers():
            if self.proc.poll() is not None:
                err = self.proc.stderr.read().decode(errors="replace") if self.proc.stderr else ""
                raise RuntimeError(f"mosquitto exited with {self.proc.returncode}: {err}")
            if time.monotonic() > deadline:
                raise RuntimeError(f"mosquitto did not answer on port {self.port}")
            time.sleep(0.05)

    def _answers(self) -> bool:
        if not self.tls:
            return broker_answers(self.host, self.port, timeout=0.5)
        try:  # a TLS listener: the MQTT probe speaks plain TCP, so a connect must do
            socket.create_connection((self.host, self.port), timeout=0.5).close()
            return True
        except OSError:
            return False

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()  # SIGTERM: mosquitto saves its persistence file on the way out
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self.proc = None

    def kill(self) -> None:
        """SIGKILL: gone without saving, like a power cut (what was saved a second ago survives)."""
        if self.proc is not None:
            self.proc.kill()
            self.proc.wait()
        self.proc = None

    def freeze(self) -> None:
        """SIGSTOP: the broker keeps its sockets but answers nothing (packets stay in flight)."""
        assert self.proc is not None
        self.proc.send_signal(signal.SIGSTOP)

    def restart(self) -> None:
        self.stop()
        self.start()

    @property
    def running(self) -> bool:
        return self.proc is not None and self.proc.poll() is None


@pytest.fixture
def mosquitto_broker(tmp_path: Path) -> Iterator[Mosquitto]:
    if not Path(MOSQUITTO).exists():
        if os.environ.get("CI") == "true":
            pytest.fail("mosquitto is not installed; under CI .ci/run installs it")
        pytest.skip("mosquitto is not installed (apt install mosquitto)")
    workdir = tmp_path / "mosquitto"
    workdir.mkdir()
    broker = Mosquitto(workdir)
    broker.start()
    yield broker
    broker.stop()


@pytest.fixture
def mosquitto(mosquitto_broker: Mosquitto) -> Iterator[Mosquitto]:
    """The broker; unpack as ``host, port = mosquitto``, or call ``mosquitto.restart()``."""
    yield mosquitto_broker


class DemoReplay:
    """The demo passage replayed once for the whole session (about a minute)."""

    def __init__(self, tmp: Path) -> None:
        from daemon.commands.demo import demo_files
        from daemon.outlets.jsonl import encode_line
        from daemon.core.config import load_config
        from daemon.commands.replay import run_replay

        files, cfg = demo_files()
        self.path = Path(files[0])
        from tests.helpers import Keep

        keep = Keep()
        self.summary = run_replay(files, load_config(cfg), extra_sinks=[keep], progress=False)
        self.messages = keep.messages
        self.lines = [encode_line(m) for m in self.messages]


@pytest.fixture(scope="session")
def demo_replay(tmp_path_factory) -> DemoReplay:
    """The committed demo passage through the whole pipeline, with the demo's own config."""
    return DemoReplay(tmp_path_factory.mktemp("demo"))
