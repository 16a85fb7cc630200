"""Small JSON files in the state directory, written so a power cut leaves the old or the new one."""

from __future__ import annotations

import json
import logging
import os
from pathlib import Path
from typing import Any

log = logging.getLogger(__name__)


def write_json_atomic(path: Path, data: Any) -> None:
    """Write to a temporary file, fsync it, rename over the old one, fsync the directory."""
    path = Path(path)
    tmp = path.with_suffix(path.suffix + ".tmp")
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(data, f, indent=1, sort_keys=True)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)
    try:
        fd = os.open(path.parent, os.O_RDONLY)
    except OSError:
        return  # some filesystems cannot open a directory; the rename is still atomic
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def read_json(path: Path) -> Any | None:
    """The file's content, or None when absent or unreadable (logged: a corrupt file is not fatal)."""
    try:
        with open(path, encoding="utf-8") as f:
            return json.load(f)
    except FileNotFoundError:
        return None
    except (OSError, ValueError) as e:
        log.warning("ignoring unreadable state file %s: %s", path, e)
        return None
