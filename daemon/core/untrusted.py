"""Everything received is data: bounded JSON and terminal-safe text.

A payload from the broker may come from any app aboard. Before parsing, its
size and its nesting depth are bounded (a 1000-deep ``[[[`` would make the
JSON parser recurse until it fails); after parsing, a string that will reach a
terminal loses every control character (ESC starts a sequence that can clear
the screen, move the cursor or draw fake text; C1 controls 0x80-0x9F do the
same on some terminals), and is cut to a bounded length.
"""

from __future__ import annotations

import json
import math
import re
import unicodedata
from typing import Any

MAX_PAYLOAD_BYTES = 64 * 1024
MAX_JSON_DEPTH = 16

# ECMA-48 control sequences, removed whole so no half of one is left to read:
# CSI (ESC [ or C1 0x9B) parameters and a final byte; OSC, DCS, APC, PM, SOS strings up to BEL or ST;
# any other two-character escape.
_ESCAPE_SEQUENCE = re.compile(
    r"(?:\x1b\[|\x9b)[0-?]*[ -/]*[@-~]?"
    r"|(?:\x1b[\]PX^_]|[\x90\x98\x9d\x9e\x9f])[^\x07\x1b\x9c]*(?:\x07|\x1b\\|\x9c)?"
    r"|\x1b[ -~]?")


def json_depth_ok(payload: bytes, max_depth: int = MAX_JSON_DEPTH) -> bool:
    """True when no array or object nests deeper than ``max_depth`` (strings skipped)."""
    depth = 0
    in_string = escaped = False
    for byte in payload:
        if in_string:
            if escaped:
                escaped = False
            elif byte == 0x5C:  # backslash
                escaped = True
            elif byte == 0x22:  # quote
                in_string = False
        elif byte == 0x22:
            in_string = True
        elif byte in (0x5B, 0x7B):  # [ {
            depth += 1
            if depth > max_depth:
                return False
        elif byte in (0x5D, 0x7D):  # ] }
            depth -= 1
    return True


def load_json_object(payload: bytes, *, max_bytes: int = MAX_PAYLOAD_BYTES,
                     max_depth: int = MAX_JSON_DEPTH) -> tuple[dict[str, Any] | None, str]:
    """A JSON object from untrusted bytes -> (object, ""), or (None, why it was refused)."""
    if len(payload) > max_bytes:
        return None, f"{len(payload)} bytes (more than {max_bytes})"
    if not json_depth_ok(payload, max_depth):
        return None, f"nested deeper than {max_depth}"
    try:
        doc = json.loads(payload.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None, "not UTF-8 JSON"
    if not isinstance(doc, dict):
        return None, "not a JSON object"
    return doc, ""


def clean_text(value: Any, max_len: int = 400) -> str:
    """A string safe to print: control and format characters become spaces, length bounded.

    Anything but a string (a number, an object where text was expected) gives "".
    """
    if not isinstance(value, str):
        return ""
    value = _ESCAPE_SEQUENCE.sub(" ", value[: max_len * 2])  # bound the work first
    out = []
    for ch in value:
        cat = unicodedata.category(ch)
        # Cc: C0/C1 controls (ESC, CSI 0x9B...); Cf: bidi overrides and other invisible format marks;
        # Cs/Co/Cn: surrogates, private use, unassigned; Zl/Zp: line and paragraph separators
        out.append(" " if cat in ("Cc", "Cf", "Cs", "Co", "Cn", "Zl", "Zp") else ch)
    text = " ".join("".join(out).split())
    return text if len(text) <= max_len else text[: max_len - 1] + "…"


def finite_number(value: Any) -> float | None:
    """A finite int or float as float; anything else (bool, str, object, NaN) is None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        f = float(value)
    except OverflowError:  # an int with hundreds of digits
        return None
    return f if math.isfinite(f) else None
