"""One source's bytes to time-stamped raw lines and readings: framer -> parser -> clock.

``Ingest.feed(data, recv_utc)`` frames the bytes (:mod:`daemon.intake.framer`), checks
and parses every line (:mod:`daemon.nmea0183.codec`), gives it a data time
(:mod:`daemon.intake.timing`) and returns, in time order, a :class:`RawLine` for every
framed line (valid or not) followed by the :class:`Reading` items it produced.
Every rejected line and every dropped value is counted in the shared
:class:`daemon.intake.counters.Counters`.

Headings: HDT and THS are true, HDM magnetic, HDG magnetic with its own
deviation (applied) and variation (given to the variation provider, like
RMC's). A magnetic direction becomes true with the provider's variation at
the data time; with none known it is counted ``no_variation`` and dropped.
``heading_sensor`` states the installation: ``"true"`` (a GNSS compass that
labels its true heading HDG/HDM: taken as true, deviation ignored, its
variation field not trusted), ``"magnetic"`` (every heading sentence is
magnetic, HDT included) or ``"auto"`` (as each sentence says).

MWV theoretical wind gives an angle off the bow; it is turned into a
direction with the latest true heading when one is at most
``HEADING_FOR_WIND_MAX_AGE_S`` old, else the angle alone is passed on.
Every fix goes to the provider as the latest position.

Public API:

- ``Ingest(source, *, counters, variation, live, allow_no_checksum=False,
  heading_sensor="auto", not_before_utc=None, default_date=None)``:
  ``not_before_utc`` is the week-rollover reference (and the time given to a
  replay with no time at all); ``default_date`` dates GGA/GLL times of a
  replay that never sends RMC/ZDA.
- ``feed(data, recv_utc)``: bytes as they came. Live: every line's data time
  is ``recv_utc``. Replay (``recv_utc`` may be None): data time from the
  data; lines wait in the clock until the next fix time, so output lags input
  by up to one fix interval.
- ``feed_timed_line(text, t_s, recv_utc)``: one line with its time given (our
  own recording), no clock.
- ``flush()``: end of stream: the framer's last unterminated line and all the
  clock still holds.
- ``time_events``: what the clock did (also in the counters, per source).
"""

from __future__ import annotations

import datetime as dt
import logging
from functools import lru_cache, partial
from typing import Protocol

from daemon.intake.counters import Counters
from daemon.errors import ConfigError
from daemon.intake.framer import MAX_LINE, LineFramer
from daemon.nmea0183.codec import (
    Extract, LabelledHeading, Measured, SensorHeading, ValuesFault, Variation, WindFromMagnetic, WindOffBow,
    open_line, read_sentence,
)
from daemon.core.readings import RawLine, Reading
from daemon.intake.timing import GnssDate, ReplayClock
from estimators.angles import wrap_360
from estimators.samples import Fix, Heading, Sample, WaterWind

log = logging.getLogger(__name__)

HEADING_SENSORS = ("auto", "magnetic", "true")
HEADING_FOR_WIND_MAX_AGE_S = 10.0
# Sentences whose reading an Ingest keeps (the latest distinct ones). A steady heading, depth or temperature
# sends the same sentence word for word again and again: of the real captures' lines 64-72 % repeat one of
# the latest 1 024 distinct sentences, of the demo's first hour 49 %. A repeat costs a lookup, not its checksum,
# fields and values; each kept one is about 500 bytes.
SENTENCES_KEPT = 1024

Item = RawLine | Reading
# A named tuple's own __new__ is a Python function (about 3 000 machine instructions a call against 1 600):
# made straight from their fields, every field given, once a line and once a reading.
_raw_line = partial(tuple.__new__, RawLine)
_reading = partial(tuple.__new__, Reading)


class ParsedLine:
    """One line parsed, waiting for its data time (the replay clock holds these).

    A plain class with slots, not a frozen dataclass: one is made for every line, and a frozen
    dataclass's ``__init__`` costs twice as much (it sets each field through ``object.__setattr__``).
    """

    __slots__ = ("text", "recv_utc", "key", "extract", "gnss_utc", "undated_tod_s", "tag_time", "counts")

    def __init__(self, text: str, recv_utc: float | None, key: str, extract: Extract | None,
                 gnss_utc: float | None, undated_tod_s: float | None, tag_time: float | None,
                 counts: list[tuple[str, int]]) -> None:
        self.text = text
        self.recv_utc = recv_utc
        self.key = key  # sentence type, or the counter key of a line that is none ("-", "TAG")
        self.extract = extract  # None: not an understood sentence, or unparseable
        self.gnss_utc = gnss_utc  # its own GNSS time (UNIX s), dated
        self.undated_tod_s = undated_tod_s  # a time of day still waiting for a date
        self.tag_time = tag_time  # its TAG block's c: time
        self.counts = counts  # what it counts for, made when it is emitted


class VariationSource(Protocol):
    """What ingest needs of daemon.intake.magvar.VariationProvider."""

    def note_sentence_variation(self, east_deg: float, t_s: float) -> None: ...

    def note_position(self, lat_deg: float, lon_deg: float, t_s: float) -> None: ...

    def east_deg(self, t_s: float) -> float | None: ...


class Ingest:
    """Frames, parses and times one source's input; see the module docstring."""

    def __init__(self, source: str, *, counters: Counters, variation: VariationSource, live: bool,
                 allow_no_checksum: bool = False, heading_sensor: str = "auto",
                 not_before_utc: float | None = None, default_date: dt.date | None = None) -> None:
        if heading_sensor not in HEADING_SENSORS:
            raise ConfigError(f"installation.heading_sensor = {heading_sensor!r}: use one of "
                              + ", ".join(HEADING_SENSORS))
        self.source = source
        self.counters = counters
        self.variation = variation
        self.live = live
        self.allow_no_checksum = allow_no_checksum
        self.heading_sensor = heading_sensor
        self._framer = LineFramer()
        self._framer_seen = (-1, -1)
        self.time_events: dict[str, int] = {}
        default_day = (default_date - dt.date(1970, 1, 1)).days if default_date else None
        self._dates = GnssDate(not_before_utc=not_before_utc, default_day=default_day, events=self.time_events)
        self._clock = ReplayClock(self._dates, events=self.time_events)
        self._last_out = float("-inf")  # output time never goes backwards (a line behind is counted ``clamped``)
        self._fallback_t = not_before_utc if not_before_utc is not None else 0.0
        self._last_recv: float | None = None  # receive time of the latest chunk
        self._true_heading: tuple[float, float] | None = None  # (t_s, deg) of the latest true heading
        self._true_sensor = heading_sensor == "true"
        self._all_magnetic = heading_sensor == "magnetic"
        self._parser_faults: set[str] = set()  # exception types already logged
        # a sentence's reading depends on its text alone (and allow_no_checksum, fixed here): kept per Ingest
        self._read_sentence = lru_cache(maxsize=SENTENCES_KEPT)(
            lambda sentence: read_sentence(sentence, allow_no_checksum))
        self._to_sample = {
            Measured: self._measured_fix, LabelledHeading: self._labelled_heading,
            SensorHeading: self._sensor_heading, Variation: self._sentence_variation,
            WindOffBow: self._wind_off_bow, WindFromMagnetic: self._wind_from_magnetic,
        }

    # --- the three doors ---------------------------------------------------------------------

    def feed(self, data: bytes, recv_utc: float | None) -> list[Item]:
        """Bytes as they came; ``recv_utc`` is when (required live, may be None in replay)."""
        if self.live and recv_utc is None:
            raise ValueError("live ingest needs the receive time of each chunk")
        out: list[Item] = []
        self._last_recv = recv_utc
        for raw in self._framer.feed(data):
            self._line(raw.decode("ascii"), recv_utc, out)
        self._sync_counts()
        return out

    def feed_timed_line(self, text: str, t_s: float, recv_utc: float) -> list[Item]:
        """One line of our own recording: its data time is given (no clock involved)."""
        out: list[Item] = []
        item = self._parse(text, recv_utc)
        self._emit(t_s, item, out)
        self._sync_counts()
        return out

    def flush(self) -> list[Item]:
        """End of stream: release what the replay clock still holds (live: the framer's
        last unterminated line, stamped with the last receive time)."""
        out: list[Item] = []
        for raw in self._framer.flush():
            self._line(raw.decode("ascii"), self._last_recv, out)
        for t, item in self._clock.flush():
            self._emit(t, item, out)
        self._sync_counts()
        return out

    # --- per line ----------------------------------------------------------------------------

    def _parse(self, text: str, recv_utc: float | None) -> ParsedLine:
        """Parse one line; its counts travel with it and are made when it is emitted,
        so the counters at any moment match the lines that have left (the same in a
        replay of our own recording, whose lines arrive one by one)."""
        try:
            status, key, tag_time, _source, sentence = open_line(text)
            ex: Extract | None = None
            if status == "ok":
                try:
                    # a framed line is at most MAX_LINE long; a line of a foreign recording may be any length,
                    # and is read without being kept (what is kept stays bounded in bytes, not only in count)
                    if len(sentence) <= MAX_LINE:
                        status, key, ex = self._read_sentence(sentence)
                    else:
                        status, key, ex = read_sentence(sentence, self.allow_no_checksum)
                except ValuesFault as fault:  # an extractor's bug: the line's key is known, its values are not
                    self._note_parser_fault(fault.__cause__)
                    key = fault.key
            gnss: float | None = None
            tod: float | None = None
            if status != "ok":
                counts = [(status, 1)]
            elif ex is None:
                counts = [("unparseable", 1)]
            else:
                counts = [("good", 1)]
                if ex.implausible:
                    counts.append(("implausible", ex.implausible))
                if ex.tod_s is not None:
                    gnss = (self._dates.dated(ex.tod_s, ex.day) if ex.day is not None
                            else self._dates.undated(ex.tod_s))
                    tod = ex.tod_s if gnss is None else None
                elif not ex.values and not ex.implausible:
                    counts.append(("empty", 1))
            return ParsedLine(text, recv_utc, key, ex, gnss, tod, tag_time, counts)
        except Exception as exc:  # a parser bug must not end a watch: the line is data, counted
            self._note_parser_fault(exc)
            return ParsedLine(text, recv_utc, "-", None, None, None, None, [("unparseable", 1)])

    def _note_parser_fault(self, exc: BaseException | None) -> None:
        """Log once per exception type: a flood of one bad line must not flood the log."""
        name = type(exc).__name__
        if name not in self._parser_faults:
            self._parser_faults.add(name)
            log.warning("%s: a line broke the parser (%s), counted as unparseable; "
                        "further ones are counted only", self.source, name)

    def _line(self, text: str, recv_utc: float | None, out: list[Item]) -> None:
        item = self._parse(text, recv_utc)
        if self.live:
            assert recv_utc is not None
            self._emit(recv_utc, item, out)
            return
        released = (self._clock.push_tagged(item, item.tag_time) if item.tag_time is not None
                    else self._clock.push(item, item.gnss_utc, item.undated_tod_s))
        for t, it in released:
            self._emit(t, it, out)

    def _emit(self, t: float | None, item: ParsedLine, out: list[Item]) -> None:
        recv, key, ex, counts = item.recv_utc, item.key, item.extract, item.counts
        if t is None:
            t = recv if recv is not None else self._fallback_t
        if t < self._last_out:  # never backwards (False for NaN, which then passes, as it always has)
            self.time_events["clamped"] = self.time_events.get("clamped", 0) + 1
            t = self._last_out
        else:
            self._last_out = t
        if recv is None:
            recv = t
        source = self.source
        if ex is None or not ex.values:  # no values: the line alone
            out.append(_raw_line((source, t, recv, item.text, key, tuple(counts), ex is not None)))
            return
        readings: list[Reading] = []
        gnss = item.gnss_utc
        for v in ex.values:
            try:
                if type(v) is Measured and v.kind is not Fix:  # most values: taken as they are, without a call
                    sample = v.kind(t, *v.args)
                else:  # a fix, a heading, a variation, a wind: each its own handling
                    sample = self._to_sample[type(v)](v, t, key, counts, gnss)
            except Exception as exc:  # as in _parse: one value is never fatal
                self._note_parser_fault(exc)
                counts.append(("implausible", 1))
                continue
            if sample is not None:
                readings.append(_reading((source, sample, recv, key, gnss)))
        # the line after its values are made: they may add to its counts (no_variation, implausible)
        out.append(_raw_line((source, t, recv, item.text, key, tuple(counts), True)))
        out.extend(readings)

    # --- each kind of value to a sample at its data time ---------------------------------------

    def _measured_fix(self, v: Measured, t: float, key: str, counts: list, gnss: float | None) -> Sample:
        """A fix (``_emit`` makes every other measured value as it is)."""
        sample = Fix(t, *v.args, gnss_time_s=gnss)  # its receiver's own time: a receiver clock that stops shows
        self.variation.note_position(sample.lat_deg, sample.lon_deg, t)
        return sample

    def _labelled_heading(self, v: LabelledHeading, t: float, key: str, counts: list,
                          gnss: float | None) -> Heading | None:
        return self._heading(v.deg, v.reference == "T" and not self._all_magnetic, t, key, counts)

    def _sensor_heading(self, v: SensorHeading, t: float, key: str, counts: list,
                        gnss: float | None) -> Heading | None:
        deg = v.deg if self._true_sensor or v.deviation_east_deg is None else v.deg + v.deviation_east_deg
        return self._heading(deg, False, t, key, counts)

    def _sentence_variation(self, v: Variation, t: float, key: str, counts: list, gnss: float | None) -> None:
        if not (self._true_sensor and key == "HDG"):
            self.variation.note_sentence_variation(v.east_deg, t)

    def _wind_off_bow(self, v: WindOffBow, t: float, key: str, counts: list, gnss: float | None) -> WaterWind:
        th = self._true_heading
        if th is not None and 0.0 <= t - th[0] <= HEADING_FOR_WIND_MAX_AGE_S:
            return WaterWind(t, v.speed_kn, wrap_360(th[1] + v.angle_deg), v.angle_deg)
        return WaterWind(t, v.speed_kn, None, v.angle_deg)

    def _wind_from_magnetic(self, v: WindFromMagnetic, t: float, key: str, counts: list,
                            gnss: float | None) -> WaterWind | None:
        var = self._variation(t, counts)
        return None if var is None else WaterWind(t, v.speed_kn, wrap_360(v.from_magnetic_deg + var), None)

    def _heading(self, deg: float, is_true: bool, t: float, key: str, counts: list) -> Heading | None:
        if not (is_true or self._true_sensor):
            var = self._variation(t, counts)
            if var is None:
                return None
            deg = wrap_360(deg + var)
        self._true_heading = (t, deg)
        return Heading(t, deg)

    def _variation(self, t: float, counts: list) -> float | None:
        var = self.variation.east_deg(t)
        if var is None:
            counts.append(("no_variation", 1))
        return var

    def _sync_counts(self) -> None:
        f = self._framer
        if (f.overlong, f.bad_bytes) != self._framer_seen:
            self._framer_seen = (f.overlong, f.bad_bytes)
            self.counters.set_framer(self.source, overlong=f.overlong, bad_bytes=f.bad_bytes)
        self.counters.set_time(self.source, self.time_events)
