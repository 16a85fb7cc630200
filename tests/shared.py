"""Where the shared captures and reference values are: ``../shared`` beside the repo.

A user's clone may not have it: tests skip with a reason. Under CI (CI=true) it
is always there, so its absence fails the test instead of hiding it.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
# OFFWATCH_SHARED_DIR points elsewhere (a test of these very rules uses an empty directory)
SHARED = Path(os.environ.get("OFFWATCH_SHARED_DIR") or REPO.parent / "shared")


def shared_path(*parts: str) -> Path:
    path = SHARED.joinpath(*parts)
    if not path.exists():
        reason = f"{path} is absent (the shared captures live beside the repository)"
        if os.environ.get("CI") == "true":
            pytest.fail(reason + "; under CI it must be there")
        pytest.skip(reason)
    return path
