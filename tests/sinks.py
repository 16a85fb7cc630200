"""A sink for tests: keeps every message (and, on request, every raw line) a pipeline sends."""

from __future__ import annotations


class Keep:
    def __init__(self) -> None:
        self.messages: list = []
        self.raws: list = []
        self.closed = False

    def raw(self, line) -> None:
        self.raws.append(line)

    def message(self, msg) -> None:
        self.messages.append(msg)

    def close(self) -> None:
        self.closed = True
