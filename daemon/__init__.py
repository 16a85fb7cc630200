"""offwatch service: inputs, time, the pipeline, MQTT, recording, command line.

The only package that touches the world (serial ports, sockets, clocks, files,
MQTT, SQLite). The computation lives in ``estimators``.
"""

__version__ = "0.1.0"
