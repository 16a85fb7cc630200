"""Everything received is data: terminal-safe text and type-checked numbers.

A payload from the broker may come from any app aboard (it is bounded in size
and depth before parsing by ``daemon.outlets.mqtt.decode_json_payload``). A
string from it that will reach a terminal loses every control character (ESC
starts a sequence that can clear the screen, move the cursor or draw fake
text; C1 controls 0x80-0x9F do the same on some terminals) and is cut to a
bounded length; a number is used only when it is a finite int or float.
"""

from __future__ import annotations

import math
import re
import unicodedata
from typing import Any

# ECMA-48 control sequences, removed whole so no half of one is left to read:
# CSI (ESC [ or C1 0x9B) parameters and a final byte; OSC, DCS, APC, PM, SOS strings up to BEL or ST;
# any other two-character escape.
_ESCAPE_SEQUENCE = re.compile(
    r"(?:\x1b\[|\x9b)[0-?]*[ -/]*[@-~]?"
    r"|(?:\x1b[\]PX^_]|[\x90\x98\x9d\x9e\x9f])[^\x07\x1b\x9c]*(?:\x07|\x1b\\|\x9c)?"
    r"|\x1b[ -~]?")


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
