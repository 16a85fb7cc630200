"""What the crew tells offwatch over MQTT, kept as inputs: the source names reserved for them and how a
recorded line of each becomes its items again in a replay.

A swell report (``daemon.intake.swell``) and an acknowledgement (``daemon.intake.acks``) are JSON, not
NMEA: a recording keeps them under their own source names, a replay turns them back into what the run
fed, and the TAG-block export leaves them out.
"""

from __future__ import annotations

from collections.abc import Callable

from daemon.core.readings import Acknowledgement, RawLine, Reading
from daemon.intake import acks, swell

Replayer = Callable[[RawLine], list[RawLine | Reading | Acknowledgement]]

REPLAYERS: dict[str, Replayer] = {swell.SWELL_SOURCE: swell.replayed, acks.ACK_SOURCE: acks.replayed}
WHAT = {swell.SWELL_SOURCE: "the crew's swell reports (MQTT <prefix>/swell)",
        acks.ACK_SOURCE: "the crew's acknowledgements (MQTT <prefix>/ack)"}
