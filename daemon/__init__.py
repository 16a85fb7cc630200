"""offwatch service: inputs, time, the pipeline, MQTT, recording, command line.

The only package that touches the world (serial ports, sockets, clocks, files,
MQTT, SQLite). The computation lives in ``estimators``.
"""

__version__ = "0.1.0"
# No GNSS date aboard can be much older than the software reading it: the reference for
# spotting a receiver that lost 1024 weeks at a week-number rollover.
RELEASE_DATE = "2026-12-01"
