"""Byte stream to NMEA 0183 lines: a small sans-I/O state machine.

The caller reads bytes from wherever they come (serial, TCP, UDP, a file) and
hands them to :meth:`LineFramer.feed` in chunks of any size; it gets back the
complete lines, without their line endings. Feeding byte by byte gives the same
lines and the same counts as feeding everything at once.

Rules (NMEA 0183 v4.10 §5.3 allows printable ASCII 0x20..0x7E in a sentence,
ended by <CR><LF>; real devices also send CR alone or LF alone):

- CR, LF and CRLF all end a line; empty lines are not returned.
- A byte outside 0x20..0x7E (NUL, other control bytes, anything >= 0x80) makes
  the line it is in *dropped* (``bad_bytes`` + 1): everything from the start of
  that line up to the byte is thrown away and the framer skips to the next
  start character (``$``, ``!`` or ``\\``), where a new line begins, or to the
  next line ending. So binary messages between sentences, NUL runs and serial
  garbage cost the garbage only.
- A line longer than ``max_line`` bytes (1 KiB; a sentence has at most 82) is
  dropped (``overlong`` + 1) and the framer resynchronises the same way, so a
  stream without line endings never grows memory.
"""

from __future__ import annotations

import re

MAX_LINE = 1024
START_CHARS = b"$!\\"

_BAD_BYTE = re.compile(rb"[^\x20-\x7e]")
_LINE_BYTES = bytes(range(0x20, 0x7F)) + b"\r\n"  # what a clean chunk holds: deleted, nothing is left
_START = re.compile(rb"[$!\\]")


class LineFramer:
    """Complete lines out of arbitrary chunks of bytes; counts what it drops."""

    def __init__(self, max_line: int = MAX_LINE) -> None:
        self.max_line = max_line
        self.overlong = 0  # lines dropped for being longer than max_line
        self.bad_bytes = 0  # lines dropped for a NUL, control or non-ASCII byte
        self._buf = bytearray()
        self._skipping = False  # inside a dropped line, waiting for a start char or line end

    def feed(self, data: bytes) -> list[bytes]:
        """Frame ``data``; return the lines it completed (bytes, no terminators)."""
        out: list[bytes] = []
        # bytes.splitlines ends a line at CR, LF and CRLF and nothing else, as the rules above; a chunk
        # that ends with a line ending leaves no start of a line after it. Both scans run in C, without
        # the regular expressions' cost per byte (the way in reads every byte of a replay).
        pieces = data.splitlines()
        tail = b"" if not pieces or data.endswith((b"\r", b"\n")) else pieces.pop()
        clean = not data.translate(None, _LINE_BYTES)
        limit = self.max_line
        for piece in pieces:  # each one was followed by a line ending
            if clean and not self._buf and not self._skipping and len(piece) <= limit:
                if piece:  # the usual case: a whole clean line in one chunk
                    out.append(piece)
                continue
            self._take(piece, out)
            self._end_line(out)
        self._take(tail, out)
        return out

    @property
    def pending_bytes(self) -> int:
        """Bytes of an unfinished line held so far (never more than ``max_line``)."""
        return len(self._buf)

    def flush(self) -> list[bytes]:
        """End of stream: the last line even without its line ending (a file's last line)."""
        out: list[bytes] = []
        self._end_line(out)
        return out

    def _end_line(self, out: list[bytes]) -> None:
        if self._buf:
            out.append(bytes(self._buf))
            self._buf.clear()
        self._skipping = False  # a line ending ends a dropped line too

    def _take(self, piece: bytes, out: list[bytes]) -> None:
        """Add the bytes of one piece of a line (no line endings inside it)."""
        pos = 0
        n = len(piece)
        while pos < n:
            if self._skipping:
                m = _START.search(piece, pos)
                if m is None:
                    return
                pos = m.start()
                self._skipping = False
            bad = _BAD_BYTE.search(piece, pos)
            end = bad.start() if bad else n
            room = self.max_line - len(self._buf)
            if end - pos > room:  # the line would grow past max_line at byte pos+room
                self.overlong += 1
                self._drop()
                pos += room
                continue
            self._buf += piece[pos:end]
            if bad is None:
                return
            self.bad_bytes += 1
            self._drop()
            pos = end + 1

    def _drop(self) -> None:
        self._buf.clear()
        self._skipping = True
