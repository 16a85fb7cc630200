"""A simulated run as NMEA 0183 text: the lines the instruments would have sent.

Sentence layouts follow NMEA 0183 version 2.3/3.01 (field order of RMC, GGA,
VTG, ZDA, HDG, HDT, VHW, MTW, MDA, MWV, DPT and XDR, with the mode indicator
of 2.3 in RMC and VTG), each field placed by name from the codec's one table of
field layouts (``daemon.nmea0183.codec.LAYOUTS``, through ``place``). The checksum is the XOR of every character between
``$`` and ``*``, two upper-case hex digits. TAG blocks follow NMEA 0183
version 4.10: ``\\c:<UNIX time>,s:<source>*hh\\`` in front of the sentence,
with the same checksum over the text between the backslashes; ``c:`` is in
milliseconds here (the interface reads values above 10^11 as ms).

Each instrument has its own talker, TAG source name and habits:
- GNSS (``GP``, ``gnss``): RMC + GGA + VTG each fix, ZDA every ``zda_every_s``;
  during an outage it keeps sending RMC with status V and GGA with quality 0
  (time only), as receivers do; VTG carries no magnetic course;
- compass (``HC``, ``compass``): HDG with the magnetic heading and the
  variation, deviation empty (and/or HDT);
- log (``VW``, ``log``): VHW with the heading fields left empty;
- sea thermometer (``YX``, ``thermo``): MTW;
- barometer (``WI``, ``baro``): MDA with inHg and bar plus air temperature,
  and/or XDR type P in bar;
- wind vane (``WI``, ``vane``): MWV relative and MWV theoretical;
- sounder (``SD``, ``sounder``): DPT with the transducer offset;
- heel sensor (``II``, ``attitude``): XDR type A, ``HEEL``, positive to starboard.
"""

from __future__ import annotations

import csv
import gzip
import io
import math
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from daemon.nmea0183.codec import format_sentence, place, tag_block
from estimators.angles import wrap_360
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, Heading, Pressure, SeaTemperature, WaterSpeed, WaterWind,
)

from .boat import TRUTH_FIELDS
from .run import SimRun

HPA_PER_INHG = 33.8638866667  # 1 inHg = 3386.38866667 Pa (NIST SP 811)
KMH_PER_KN = 1.852


@dataclass(frozen=True)
class WriterOptions:
    """How the instruments talk. ``malformed``: (t_s, "bad_checksum" | "truncated" | "garbage")."""

    tag_blocks: bool = True
    heading_sentences: tuple[str, ...] = ("HDG",)  # any of "HDG", "HDT", "HDM"
    pressure_sentences: tuple[str, ...] = ("MDA",)  # any of "MDA", "XDR"
    zda_every_s: float = 10.0
    transducer_offset_m: float = 0.5  # DPT offset: transducer to waterline
    antenna_height_m: float = 2.5
    malformed: tuple[tuple[float, str], ...] = ()


# --------------------------------------------------------------------------- formatting


sentence = format_sentence  # the codec writes sentences, as it reads them


def _num(x: float | None, decimals: int) -> str:
    return "" if x is None or not math.isfinite(x) else f"{x:.{decimals}f}"


def _angle_field(value: float, width: int, positive: str, negative: str) -> tuple[str, str]:
    """(d..dmm.mmmmm, hemisphere) with ``width`` digits of whole degrees."""
    a = abs(value)
    d = int(a)
    m = round((a - d) * 60.0, 5)
    if m >= 60.0:
        d, m = d + 1, 0.0
    return f"{d:0{width}d}{m:08.5f}", positive if value >= 0 else negative


def lat_field(lat: float) -> tuple[str, str]:
    """(ddmm.mmmmm, N|S)"""
    return _angle_field(lat, 2, "N", "S")


def lon_field(lon: float) -> tuple[str, str]:
    """(dddmm.mmmmm, E|W)"""
    return _angle_field(lon, 3, "E", "W")


def _utc(t_s: float) -> datetime:
    return datetime.fromtimestamp(round(t_s, 2), tz=timezone.utc)


def time_field(t_s: float) -> str:
    d = _utc(t_s)
    return f"{d:%H%M%S}.{d.microsecond // 10000:02d}"


def date_field(t_s: float) -> str:
    return f"{_utc(t_s):%d%m%y}"


def _var(variation_deg: float) -> tuple[str, str]:
    return f"{abs(variation_deg):.1f}", "E" if variation_deg >= 0 else "W"


# --------------------------------------------------------------------------- one sentence each


def rmc(fix: Fix, variation_deg: float, talker: str = "GP") -> str:
    la, ns = lat_field(fix.lat_deg)
    lo, ew = lon_field(fix.lon_deg)
    v, ve = _var(variation_deg)
    return sentence(talker, "RMC", place("RMC", time=time_field(fix.t_s), status="A", lat=la, lat_hemi=ns, lon=lo,
                                         lon_hemi=ew, sog_kn=_num(fix.sog_kn, 2), cog_true=_num(fix.cog_deg, 1),
                                         date=date_field(fix.t_s), variation=v, variation_hemi=ve, mode="A"))


def rmc_void(t_s: float, talker: str = "GP") -> str:
    return sentence(talker, "RMC", place("RMC", time=time_field(t_s), status="V", date=date_field(t_s), mode="N"))


def gga(fix: Fix, antenna_height_m: float, talker: str = "GP") -> str:
    la, ns = lat_field(fix.lat_deg)
    lo, ew = lon_field(fix.lon_deg)
    return sentence(talker, "GGA", place("GGA", time=time_field(fix.t_s), lat=la, lat_hemi=ns, lon=lo, lon_hemi=ew,
                                         quality="1", satellites="09", hdop=_num(fix.hdop, 1),
                                         altitude=_num(antenna_height_m, 1), altitude_unit="M", geoid_sep_unit="M",
                                         dgps_station=""))


def gga_void(t_s: float, talker: str = "GP") -> str:
    return sentence(talker, "GGA", place("GGA", time=time_field(t_s), quality="0", satellites="00", altitude_unit="M",
                                         geoid_sep_unit="M", dgps_station=""))


def vtg(fix: Fix, talker: str = "GP") -> str:
    kmh = None if fix.sog_kn is None else fix.sog_kn * KMH_PER_KN
    return sentence(talker, "VTG", place("VTG", cog_true=_num(fix.cog_deg, 1), true_mark="T", magnetic_mark="M",
                                         sog_kn=_num(fix.sog_kn, 2), kn_unit="N", sog_kmh=_num(kmh, 2), kmh_unit="K",
                                         mode="A"))


def zda(t_s: float, talker: str = "GP") -> str:
    d = _utc(t_s)
    return sentence(talker, "ZDA", place("ZDA", time=time_field(t_s), day=f"{d.day:02d}", month=f"{d.month:02d}",
                                         year=f"{d.year:04d}", zone_hours="00", zone_minutes="00"))


def hdg(h: Heading, variation_deg: float, talker: str = "HC") -> str:
    magnetic = wrap_360(round(h.true_deg - variation_deg, 1))  # true = magnetic + variation (east +)
    v, ve = _var(variation_deg)
    return sentence(talker, "HDG", place("HDG", heading=f"{magnetic:.1f}", variation=v, variation_hemi=ve))


def hdt(h: Heading, talker: str = "HC") -> str:
    return sentence(talker, "HDT", place("HDT", heading=f"{wrap_360(round(h.true_deg, 1)):.1f}", true_mark="T"))


def hdm(h: Heading, variation_deg: float, talker: str = "HC") -> str:
    return sentence(talker, "HDM", place("HDM", heading=f"{wrap_360(round(h.true_deg - variation_deg, 1)):.1f}",
                                         magnetic_mark="M"))


def vhw(w: WaterSpeed, talker: str = "VW") -> str:
    return sentence(talker, "VHW", place("VHW", true_mark="T", magnetic_mark="M", stw_kn=_num(w.speed_kn, 2),
                                         kn_unit="N", stw_kmh=_num(w.speed_kn * KMH_PER_KN, 2), kmh_unit="K"))


def mtw(s: SeaTemperature, talker: str = "YX") -> str:
    return sentence(talker, "MTW", place("MTW", temp=_num(s.temp_c, 2), temp_unit="C"))


def mda(p: Pressure | None, air: AirTemperature | None, talker: str = "WI") -> str:
    hpa = None if p is None else p.station_hpa
    inhg = None if hpa is None else hpa / HPA_PER_INHG
    bar = None if hpa is None else hpa / 1000.0
    air_c = None if air is None else air.temp_c
    return sentence(talker, "MDA", place("MDA", inhg=_num(inhg, 4), inhg_unit="I", bar=_num(bar, 4), bar_unit="B",
                                         air_temp=_num(air_c, 1), air_temp_unit="C", water_temp_unit="C",
                                         dew_point_unit="C", true_mark="T", magnetic_mark="M", kn_unit="N",
                                         mps_unit="M"))


def xdr_pressure(p: Pressure, talker: str = "WI") -> str:
    return sentence(talker, "XDR", place("XDR", type="P", value=_num(p.station_hpa / 1000.0, 5), unit="B", name="BARO"))


def mwv(angle_deg: float, reference: str, speed_kn: float, talker: str = "WI") -> str:
    return sentence(talker, "MWV", place("MWV", angle=_num(wrap_360(angle_deg), 1), reference=reference,
                                         speed=_num(speed_kn, 1), speed_unit="N", status="A"))


def dpt(d: Depth, offset_m: float, talker: str = "SD") -> str:
    return sentence(talker, "DPT", place("DPT", depth_m=_num(d.depth_m - offset_m, 2), offset_m=_num(offset_m, 1),
                                         max_range_m="300"))


def xdr_heel(a: Attitude, talker: str = "II") -> str:
    return sentence(talker, "XDR", place("XDR", type="A", value=_num(a.heel_deg, 1), unit="D", name="HEEL"))


# --------------------------------------------------------------------------- a whole run


def _gnss_lines(t_s: float, fix: Fix | None, run: SimRun, opt: WriterOptions, last_zda: list[float]) -> list[str]:
    lines = [rmc(fix, run.variation_deg), gga(fix, opt.antenna_height_m), vtg(fix)] if fix else \
        [rmc_void(t_s), gga_void(t_s)]
    if t_s - last_zda[0] >= opt.zda_every_s - 1e-6:
        lines.append(zda(t_s))
        last_zda[0] = t_s
    return lines


def _fix_seconds_in_outage(run: SimRun) -> list[float]:
    """The whole seconds when the receiver ran but had no fix (it still sends time)."""
    out: list[float] = []
    for start, end in run.scenario.sensors.gnss_outages:
        t = math.ceil(start)
        while t < end:
            out.append(float(t))
            t += 1.0 / run.scenario.sensors.fix_hz
    return out


def run_lines(run: SimRun, opt: WriterOptions | None = None) -> Iterator[str]:
    """Every line of the run in time order, TAG blocks included when asked (no line endings)."""
    opt = opt or WriterOptions()
    voids = _fix_seconds_in_outage(run)
    items: list[tuple[float, int, object]] = [(s.t_s, i, s) for i, s in enumerate(run.samples)]
    items += [(t, -1, None) for t in voids]
    items.sort(key=lambda x: (x[0], x[1]))
    pending = sorted(opt.malformed)
    last_zda = [-1e18]
    pressure: Pressure | None = None
    for t, _, s in items:
        for src, text in _sentences(t, s, run, opt, last_zda, pressure):
            line = (tag_block(t, src) if opt.tag_blocks else "") + text
            if pending and t >= pending[0][0]:
                line = _spoil(line, pending.pop(0)[1])
            yield line
        if isinstance(s, Pressure):
            pressure = s
        elif isinstance(s, AirTemperature):
            pressure = None


def _sentences(t: float, s: object, run: SimRun, opt: WriterOptions, last_zda: list[float],
               pressure: Pressure | None) -> list[tuple[str, str]]:
    if s is None or isinstance(s, Fix):
        return [("gnss", x) for x in _gnss_lines(t, s, run, opt, last_zda)]
    if isinstance(s, Heading):
        out = []
        for kind in opt.heading_sentences:
            out.append(("compass", hdg(s, run.variation_deg) if kind == "HDG" else
                        hdt(s) if kind == "HDT" else hdm(s, run.variation_deg)))
        return out
    if isinstance(s, WaterSpeed):
        return [("log", vhw(s))]
    if isinstance(s, SeaTemperature):
        return [("thermo", mtw(s))]
    if isinstance(s, Pressure):
        return [("baro", xdr_pressure(s))] if "XDR" in opt.pressure_sentences else []
    if isinstance(s, AirTemperature):
        # the barometer sends one MDA a cycle: the pressure just read and the air temperature
        return [("baro", mda(pressure, s))] if "MDA" in opt.pressure_sentences else []
    if isinstance(s, ApparentWind):
        return [("vane", mwv(s.angle_deg, "R", s.speed_kn))]
    if isinstance(s, WaterWind):
        return [("vane", mwv(s.angle_deg if s.angle_deg is not None else 0.0, "T", s.speed_kn))]
    if isinstance(s, Depth):
        return [("sounder", dpt(s, opt.transducer_offset_m))]
    if isinstance(s, Attitude):
        return [("attitude", xdr_heel(s))]
    return []


def _spoil(line: str, how: str) -> str:
    """A deliberately malformed line, so the reader's counters have something to count."""
    if how == "bad_checksum":
        star = line.rindex("*")
        good = int(line[star + 1:star + 3], 16)
        return f"{line[:star + 1]}{good ^ 0x5A:02X}"
    if how == "truncated":
        return line[: max(8, len(line) // 2)]
    if how == "garbage":
        return "#~?%@" + line[len(line) // 3:]
    raise ValueError(f"unknown malformation {how!r}: use bad_checksum, truncated or garbage")


def write_nmea(run: SimRun, path: str | Path, opt: WriterOptions | None = None) -> int:
    """Write the run as NMEA text with CR LF endings (gzip when the name ends in .gz, with a fixed
    header time so the file is the same byte for byte). Returns the number of lines."""
    n = 0
    with _open_text(Path(path)) as f:
        for line in run_lines(run, opt):
            f.write(line + "\r\n")
            n += 1
    return n


def write_truth_csv(run: SimRun, path: str | Path, every_s: float = 1.0) -> int:
    """The truth as CSV: ``time_utc`` (ISO 8601 Z) then ``TRUTH_FIELDS``; one row every ``every_s``."""
    truth = run.truth
    step = max(1, int(round(every_s / run.scenario.truth_dt_s)))
    n = 0
    with _open_text(Path(path)) as f:
        f.write(",".join(("time_utc",) + TRUTH_FIELDS) + "\n")
        for row in truth[::step]:
            t = float(row["t_s"])
            iso = _utc(t).strftime("%Y-%m-%dT%H:%M:%S.") + f"{_utc(t).microsecond // 1000:03d}Z"
            vals = [iso] + [_csv(f, row[f]) for f in TRUTH_FIELDS]
            f.write(",".join(vals) + "\n")
            n += 1
    return n


def read_truth_csv(path: str | Path) -> dict[str, np.ndarray]:
    """A truth CSV as ``write_truth_csv`` writes it, gzipped or not: every column but ``time_utc``, as floats."""
    path = Path(path)
    opener = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rt", encoding="ascii", newline="") as f:
        rows = list(csv.DictReader(f))
    return {name: np.array([float(r[name]) for r in rows]) for name in rows[0] if name != "time_utc"}


def _csv(field: str, v) -> str:
    if field in ("motoring", "leg"):
        return str(int(v))
    if field in ("lat", "lon"):
        return f"{float(v):.7f}"
    if field == "t_s":
        return f"{float(v):.1f}"
    return f"{float(v):.4f}"


class _open_text:
    def __init__(self, path: Path) -> None:
        self.path = path

    def __enter__(self) -> io.TextIOWrapper:
        self.raw = open(self.path, "wb")
        if self.path.suffix == ".gz":
            self.gz = gzip.GzipFile(filename="", mode="wb", fileobj=self.raw, mtime=0, compresslevel=9)
            self.f = io.TextIOWrapper(self.gz, encoding="ascii", newline="")
        else:
            self.gz = None
            self.f = io.TextIOWrapper(self.raw, encoding="ascii", newline="")
        return self.f

    def __exit__(self, *exc) -> None:
        self.f.close()
        if self.gz is not None:
            self.raw.close()
