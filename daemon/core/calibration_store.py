"""The learnt speed-log and compass calibration, kept across restarts.

One small JSON file in the state directory (``calibration.json``), written
atomically (a temporary file beside it, flushed and fsync'd, then renamed over
the old one, then the directory fsync'd), so a power cut leaves either the old
calibration or the new one, never half of either. The file carries the
calibration's data time ``t_s`` and its sigmas; the estimator inflates those
sigmas with the calibration's age when it starts from it. A missing file means
"no calibration yet"; a corrupt or unreadable one is logged and ignored (the
estimator then starts from its prior), never fatal.
"""

from __future__ import annotations

import json
import logging
import os
from pathlib import Path

from daemon.errors import OutputError
from daemon.core.statefiles import write_json_atomic
from estimators.current import Calibration

log = logging.getLogger(__name__)

FILE_NAME = "calibration.json"
FORMAT = "offwatch-calibration-1"


def calibration_path(state_dir: str | os.PathLike) -> Path:
    return Path(state_dir) / FILE_NAME


def save_calibration(state_dir: str | os.PathLike, calibration: Calibration, saved_utc_s: float) -> Path:
    """Write ``calibration`` atomically; ``saved_utc_s`` is the wall-clock time of writing (for the record).

    Raises OutputError (naming the path) when the directory cannot be written.
    """
    path = calibration_path(state_dir)
    doc = {"format": FORMAT, "saved_utc_s": saved_utc_s, "calibration": calibration.to_dict()}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_json_atomic(path, doc)
    except OSError as e:
        raise OutputError(f"cannot write the calibration to {path}: {e.strerror or e}") from e
    return path


def load_calibration(state_dir: str | os.PathLike) -> Calibration | None:
    """The saved calibration, or None when there is none or the file is unusable (then logged)."""
    path = calibration_path(state_dir)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except OSError as e:
        log.warning("calibration file %s unreadable (%s): starting uncalibrated", path, e.strerror or e)
        return None
    try:
        doc = json.loads(text)
        if not isinstance(doc, dict) or doc.get("format") != FORMAT or not isinstance(doc.get("calibration"), dict):
            raise ValueError(f"not an {FORMAT} document")
        return Calibration.from_dict(doc["calibration"])
    except (ValueError, TypeError) as e:
        log.warning("calibration file %s is corrupt (%s): ignored, starting uncalibrated", path, e)
        return None


def calibration_age_s(calibration: Calibration, now_s: float) -> float | None:
    """Age of a calibration in seconds at ``now_s`` (data time), or None when it has no time."""
    return None if calibration.t_s is None else max(0.0, now_s - calibration.t_s)
