"""The short fuzz run: the way in takes anything without an exception escaping.

Seeded from the real captures and the simulator's demo passage, mutated so the
lines still pass the checksum and reach the field parsers (tools/fuzz/mutate.py).
Hypothesis drives the seeds and the mutations; the long run (a million lines,
memory watched) is ``python -m tools.fuzz``.
"""

from __future__ import annotations

import json
import math
import random

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from daemon.core.config import build_config
from daemon.errors import ConfigError
from daemon.intake.counters import Counters
from daemon.intake.framer import LineFramer
from daemon.intake.timing import GnssDate, ReplayClock
from daemon.nmea0183.codec import EXTRACTORS, extract, open_line, parse_line, read_sentence, split_tag
from estimators.limits import DATA_TIME_S
from tests.shared import REPO, shared_path
from tools.fuzz.feed import run_ingest, seed_lines
from tools.fuzz.mutate import mutate, reframe

_SEEDS: list[str] = []


def seeds() -> list[str]:
    """Real and simulated lines, read once."""
    if not _SEEDS:
        paths = [shared_path("real-captures", n) for n in ("berth-13min-mda-pressure.nmea",
                                                           "sounder-survey-43min-dpt-mtw.nmea",
                                                           "under-way-94min-hdg-hdt-rmc.nmea")]
        paths.append(REPO / "recorded_runs" / "tern-of-haldane.nmea.gz")
        _SEEDS.extend(seed_lines(paths, per_file=3000))
    return _SEEDS


FUZZ = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FUZZ
@given(st.integers(0, 2**32 - 1), st.booleans())
def test_mutated_streams_through_ingest_never_raise(seed, live):
    # GIVEN 300 lines, mostly mutants of real and simulated sentences, in random chunks
    # WHEN they go through framer, parser, clock and counters (run_ingest also dumps the JSON)
    n = run_ingest(random.Random(seed), seeds(), 300, live=live)
    # THEN nothing escaped and every line left as a RawLine (or was dropped by the framer, counted)
    assert n > 0


@FUZZ
@given(st.integers(0, 2**32 - 1))
def test_a_mutated_sentence_is_sorted_into_one_counter_and_values_stay_in_range(seed):
    rng = random.Random(seed)
    for _ in range(50):
        line = parse_line(mutate(rng, rng.choice(seeds())), allow_no_checksum=rng.random() < 0.5)
        if line.status != "ok":
            continue
        assert line.key in EXTRACTORS
        ex = extract(line.key, line.fields)
        if ex is None:
            continue
        for v in ex.values:
            for x in getattr(v, "args", ()) + tuple(getattr(v, f) for f in getattr(v, "__dataclass_fields__", ())
                                                    if f not in ("kind", "args", "reference")):
                if isinstance(x, float):
                    assert math.isfinite(x)  # NaN and infinity never pass the plausibility table
        if ex.tod_s is not None:
            assert 0.0 <= ex.tod_s < 86401.0


def _values(ex):
    return None if ex is None else (repr(ex.values), ex.implausible, ex.tod_s, ex.day)


@FUZZ
@given(st.integers(0, 2**32 - 1))
def test_a_sentence_read_in_one_step_reads_as_parse_line_and_extract(seed):
    # GIVEN mutated lines; WHEN read as the Ingest reads them (open_line, then read_sentence, which it keeps)
    # THEN status, key, TAG time and values are parse_line's and extract's
    rng = random.Random(seed)
    for _ in range(50):
        text, allow = mutate(rng, rng.choice(seeds())), rng.random() < 0.5
        line = parse_line(text, allow_no_checksum=allow)
        status, key, tag_time, _source, sentence = open_line(text)
        if status == "ok":
            status, key, ex = read_sentence(sentence, allow)
        else:
            ex = None
        assert (status, key) == (line.status, line.key)
        assert tag_time == line.tag_time or line.status != "ok"
        assert _values(ex) == _values(extract(line.key, line.fields) if line.status == "ok" else None)


@FUZZ
@given(st.text(alphabet=st.characters(min_codepoint=0x20, max_codepoint=0x7E), max_size=120))
def test_any_tag_block_text_gives_a_status_and_a_time_in_range(body):
    # printable ASCII is all the framer lets through
    status, t, _src, rest = split_tag(f"\\{body}\\$GPXXX")
    assert status in ("ok", "bad_checksum", "no_checksum", "unparseable")
    assert t is None or DATA_TIME_S[0] <= t <= DATA_TIME_S[1]
    assert rest.endswith("$GPXXX")


@FUZZ
@given(st.lists(st.binary(max_size=300), max_size=30))
def test_the_framer_takes_any_bytes_and_keeps_lines_bounded(chunks):
    framer = LineFramer()
    for c in chunks:
        for line in framer.feed(c):
            assert 0 < len(line) <= framer.max_line and all(0x20 <= b <= 0x7E for b in line)
    assert all(len(x) <= framer.max_line for x in framer.flush())


@FUZZ
@given(st.lists(st.one_of(st.none(), st.floats(allow_nan=False, allow_infinity=False,
                                                min_value=DATA_TIME_S[0], max_value=DATA_TIME_S[1])),
                max_size=60), st.lists(st.floats(min_value=DATA_TIME_S[0], max_value=DATA_TIME_S[1]), max_size=10))
def test_the_clock_releases_every_item_once_in_order_and_never_goes_back(gnss_times, tag_times):
    # GIVEN items with GNSS times (or none), then some with TAG times
    clock = ReplayClock(GnssDate())
    out = []
    for i, t in enumerate(gnss_times):
        out += clock.push(i, t)
    for j, t in enumerate(tag_times):
        out += clock.push_tagged(len(gnss_times) + j, t)
    out += clock.flush()
    # THEN every item once, in arrival order
    assert [it for _, it in out] == list(range(len(gnss_times) + len(tag_times)))
    times = [t for t, _ in out if t is not None]
    assert all(math.isfinite(t) for t in times)


_JSONISH = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=20),
    lambda kids: st.lists(kids, max_size=4) | st.dictionaries(st.text(max_size=12), kids, max_size=4),
    max_leaves=20)
_SECTIONS = st.sampled_from(["installation", "inputs", "mqtt", "alerts", "current", "pressure", "priority",
                             "state", "recording", "staleness", "nonsense"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(_SECTIONS, _JSONISH | st.dictionaries(st.text(max_size=16), _JSONISH, max_size=5),
                       max_size=5))
def test_the_config_loader_takes_any_table_and_only_ever_raises_config_error(table):
    try:
        build_config(table)
    except ConfigError as exc:
        assert str(exc)  # names the key and the fix: never empty


def test_a_sentence_rebuilt_by_the_fuzzer_passes_the_checksum():
    # the fuzzer is only useful if its mutants reach the field parsers
    assert parse_line(reframe("GPZDA,040000.00,99999999999999999999,05,2026,00,00")).status == "ok"
    assert json.dumps(Counters().snapshot()) == "{}"
