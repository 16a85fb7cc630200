"""One typed table of parameters: every field has a default, a unit and a range.

Estimator parameter classes are frozen dataclasses whose fields are made with
``param``; the daemon's config loader fills them from TOML and ``check``
validates them at start. A removed name is never reused.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any


def param(default: Any, unit: str = "", lo: float | None = None, hi: float | None = None,
          doc: str = "", choices: tuple[Any, ...] | None = None) -> Any:
    meta = {"unit": unit, "lo": lo, "hi": hi, "doc": doc, "choices": choices}
    if isinstance(default, (list, dict)):
        return dataclasses.field(default_factory=lambda: type(default)(default), metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


def describe(cls: type) -> list[dict[str, Any]]:
    """Rows (name, default, unit, range, doc) for the README and the recording."""
    rows = []
    for f in dataclasses.fields(cls):
        default = f.default if f.default is not dataclasses.MISSING else f.default_factory()
        rows.append({"name": f.name, "default": default, **f.metadata})
    return rows


def check(obj: Any) -> list[str]:
    """Problems with a filled parameter object, each naming the field and what is expected."""
    problems = []
    for f in dataclasses.fields(obj):
        v = getattr(obj, f.name)
        meta = f.metadata
        if meta.get("choices") and v not in meta["choices"]:
            problems.append(f"{f.name} = {v!r}: expected one of {', '.join(map(repr, meta['choices']))}")
            continue
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            unit = f" {meta['unit']}" if meta.get("unit") else ""
            if isinstance(v, float) and not math.isfinite(v):
                problems.append(f"{f.name} = {v!r}: expected a finite number{unit}")
            elif meta.get("lo") is not None and v < meta["lo"]:
                problems.append(f"{f.name} = {v!r}: expected at least {meta['lo']}{unit}")
            elif meta.get("hi") is not None and v > meta["hi"]:
                problems.append(f"{f.name} = {v!r}: expected at most {meta['hi']}{unit}")
    return problems
