"""``--jsonl OUT``: every published message, one JSON object a line, in order."""

from __future__ import annotations

from daemon.errors import OutputError
from daemon.core.payloads import json_encoder
from daemon.core.readings import Message, RawLine

_encode = json_encoder(ensure_ascii=False, allow_nan=False)


def encode_line(msg: Message) -> str:
    """The interface's line: ``{"t": <data time, UNIX s>, "topic": ..., "payload": {...}}``."""
    return _encode({"t": round(msg.t_s, 3), "topic": msg.topic, "payload": msg.payload})


class JsonlSink:
    def __init__(self, path: str) -> None:
        try:
            self._f = open(path, "w", encoding="utf-8", newline="\n")
        except OSError as e:
            raise OutputError(f"cannot write --jsonl file {path}: {e.strerror}") from None
        self.lines = 0

    def raw(self, line: RawLine) -> None:
        pass

    def message(self, msg: Message) -> None:
        self._f.write(encode_line(msg) + "\n")
        self.lines += 1

    def close(self) -> None:
        self._f.close()
