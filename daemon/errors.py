"""The error hierarchy at the edges. Sensor trouble is data, never one of these."""


class OffwatchError(Exception):
    """Base of every error offwatch raises on purpose."""


class ConfigError(OffwatchError):
    """A config file or command-line value is wrong; the message names the key and the fix."""


class InputError(OffwatchError):
    """An input cannot be opened or read at all (a missing replay file, say)."""


class OutputError(OffwatchError):
    """An output cannot be opened or written (recording directory, JSONL file)."""
