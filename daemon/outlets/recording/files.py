"""Where recordings go: the [recording] section, file names by UTC start time, a new file per start or per
UTC day, and the directory kept under its size cap and above the free-disk floor."""

from __future__ import annotations

import logging
import re
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from daemon.errors import OutputError
from estimators.params import param

log = logging.getLogger("offwatch.recorder")

NAME_PREFIX = "offwatch-"
NAME_SUFFIX = ".sqlite"
_MB = 1024 * 1024


@dataclass(frozen=True, slots=True)
class RecordingParams:
    """The [recording] section: where recordings go, when a new one starts, how much is kept."""

    directory: str = param("", doc="directory holding the recordings (empty: recordings/ in the state directory)")
    per: str = param("day", choices=("start", "day"),
                     doc="a new recording on each start, or one per UTC day (continued after a restart)")
    max_total_mb: float = param(2000.0, "MB", 0.1, 10_000_000.0,
                                doc="all recordings together; the oldest go first, never the current one")
    min_free_mb: float = param(200.0, "MB", 0.0, 10_000_000.0,
                               doc="free disk space to keep; below it the oldest recordings are removed")
    commit_interval_s: float = param(1.0, "s", 0.05, 10.0,
                                     doc="commit period: a power cut loses at most about this much")
    block_span_s: float = param(60.0, "s", 1.0, 3600.0,
                                doc="data time one merged compressed block covers")
    queue_size: int = param(20000, "items", 100, 1_000_000,
                            doc="items waiting for the writer; beyond it new items are dropped and counted")


# --------------------------------------------------------------------------- connection


def recording_name(t_utc: float) -> str:
    """File name of a recording started at ``t_utc`` (UNIX s): offwatch-YYYYMMDDTHHMMSSZ.sqlite."""
    return NAME_PREFIX + datetime.fromtimestamp(t_utc, timezone.utc).strftime("%Y%m%dT%H%M%SZ") + NAME_SUFFIX


_NAME_RE = re.compile(re.escape(NAME_PREFIX) + r"(\d{8})T(\d{6})Z(?:-\d+)?" + re.escape(NAME_SUFFIX) + "$")


class RecordingPolicy:
    """Names, rotation and the size cap / free-disk floor of the recordings directory.

    ``free_bytes(directory)`` is injectable for tests; by default the file
    system's free space.
    """

    def __init__(self, params: RecordingParams,
                 free_bytes: Callable[[Path], int] | None = None):
        self.params = params
        self.directory = Path(params.directory)
        self.free_bytes = free_bytes or (lambda d: shutil.disk_usage(d).free)
        self._warned_floor = False

    def recordings(self) -> list[Path]:
        """The recordings in the directory, oldest first (by the start time in the name)."""
        if not self.directory.is_dir():
            return []
        return sorted((p for p in self.directory.iterdir() if _NAME_RE.match(p.name)), key=lambda p: p.name)

    def path_for_start(self, now_utc: float) -> Path:
        """Where to record from ``now_utc``: today's recording when per="day" and it exists, else a new one."""
        try:
            self.directory.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"recording directory {self.directory} cannot be made: {exc}; "
                              "set [recording] directory to a writable place") from exc
        if self.params.per == "day":
            today = _utc_day(now_utc)
            same_day = [p for p in self.recordings() if _NAME_RE.match(p.name).group(1) == today]
            if same_day:
                return same_day[-1]
        return self.new_path(now_utc)

    def new_path(self, now_utc: float) -> Path:
        path = self.directory / recording_name(now_utc)
        n = 1
        while path.exists():
            path = self.directory / recording_name(now_utc).replace(NAME_SUFFIX, f"-{n}{NAME_SUFFIX}")
            n += 1
        return path

    def needs_new(self, current: Path, now_utc: float) -> bool:
        """True when per="day" and the UTC day has moved on past the current recording's day."""
        if self.params.per != "day":
            return False
        m = _NAME_RE.match(current.name)
        return m is not None and _utc_day(now_utc) > m.group(1)

    def enforce(self, current: Path) -> list[Path]:
        """Remove the oldest recordings (never ``current``) past the size cap or under the free floor."""
        removed = []
        cap = self.params.max_total_mb * _MB
        floor = self.params.min_free_mb * _MB
        for old in self.recordings():
            if old == current:
                continue
            total = sum(_recording_bytes(p) for p in self.recordings())
            free = self.free_bytes(self.directory)
            if total <= cap and free >= floor:
                break
            reason = (f"all recordings {total / _MB:.1f} MB > cap {self.params.max_total_mb} MB" if total > cap
                      else f"free disk {free / _MB:.1f} MB < floor {self.params.min_free_mb} MB")
            size = _recording_bytes(old)
            for part in _recording_files(old):
                part.unlink(missing_ok=True)
            log.warning("removed oldest recording %s (%.1f MB): %s", old.name, size / _MB, reason)
            removed.append(old)
        free = self.free_bytes(self.directory)
        if free < floor and not self._warned_floor:
            log.warning("free disk %.1f MB is under the floor %.1f MB and only the current recording is left",
                        free / _MB, self.params.min_free_mb)
        self._warned_floor = free < floor
        return removed


def _recording_files(path: Path) -> list[Path]:
    return [path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")]


def _recording_bytes(path: Path) -> int:
    return sum(p.stat().st_size for p in _recording_files(path) if p.exists())


def _utc_day(t_utc: float) -> str:
    return datetime.fromtimestamp(t_utc, timezone.utc).strftime("%Y%m%d")
