r"""The passage recording: every raw sentence and every published message, in SQLite.

The package, a module a job: ``recorder`` the Sink the pipeline hands lines and messages to
(``Recorder``: a queue and one writer thread), ``writer`` one file's commits (``RecordingWriter``),
``schema`` the tables, the one way to open a recording (``connect``) and the block codec, ``files``
where recordings go (``RecordingParams``, ``RecordingPolicy``: names, rotation, the size cap),
``reading`` a recording read back (``iter_raw``, ``iter_messages``, ``recording_gaps``, ``read_meta``)
and ``tag_nmea`` its raw sentences as TAG-block NMEA text and back.

The pipeline hands each raw line and each message to ``Recorder`` (a Sink),
which only puts it on a bounded queue (a full queue drops and counts, it never
waits). One writer thread owns the one connection: it commits about once a
second, so a power cut loses at most the last second, and SD-card writes stay
few. Every connection runs in WAL mode with ``synchronous=FULL``: with NORMAL
a power cut may take everything since the last checkpoint.

Raw sentences and messages are kept in compressed blocks: each commit writes
what arrived since the last one as a small zlib block; once the small blocks
span about a minute of data (or 60 commits, or many lines) they are replaced,
in the same transaction, by one lzma block. Alert changes are also kept in a
plain table for plain SQL.

## Recording file format (schema version 2)

One SQLite file per recording, named by its UTC start time,
`offwatch-YYYYMMDDTHHMMSSZ.sqlite`. Times are UNIX seconds (UTC).

| table | column | meaning |
| --- | --- | --- |
| `meta` | `key`, `value` | text pairs: `schema_version` (`2`), `created_utc` (ISO 8601), `software` (`offwatch <version>`), `config` (the effective configuration as JSON, rewritten by each `record_config`), `config_utc` |
| `raw_block` | `seq_first` | recording-wide number (from 0) of the block's first line; the numbers of lines that were lost (a full disk, a full queue) are skipped, never reused, so a hole in the numbering is a gap even where no `gap` row could be written |
| | `n_lines` | lines in the block |
| | `t_first`, `t_last` | earliest and latest data time in the block, s |
| | `names` | JSON array of the source names; each line gives an index into it |
| | `codec` | `zlib` (one commit's lines) or `lzma` (merged, about a minute) |
| | `data` | the compressed lines |
| `message_block` | as `raw_block` | `names` holds the full topics |
| `gap` | `stream` | `raw` or `message`: which block table lost lines (version 2) |
| | `seq_first`, `n_lost` | the numbers the lost lines would have had |
| | `t_first`, `t_last` | their data times, s (null when unknown) |
| | `wall_utc` | when it was noticed (UNIX s) |
| | `reason` | e.g. `database or disk is full`, `queue full` |
| `alert` | `t` | data time of the change, s |
| | `alert_id`, `priority`, `state`, `text`, `since` | as published on `offwatch/alerts/<id>` (`since` is ISO 8601 UTC) |
| | `topic`, `payload` | the full topic and the payload as JSON |

Indexes: `raw_block(t_first)`, `message_block(t_first)`, `alert(t)`; each
block table is unique on `seq_first` (the order to read in). A gap's row is
written with the first commit that works again; a gap at the very end of a
recording, when the disk never freed, is the one a file cannot hold: the
process says it (replay's exit status, run's ``recording_fault`` alert).
Version 1 files (no `gap` table, no skipped numbers) are read as before, and
appending to one upgrades it to version 2 (the table is added).

A block decompresses (`zlib.decompress` or `lzma.decompress`) to ASCII JSON
arrays, one line each, in arrival order:
- raw: `[time, recv, name_index, text]`
- message: `[time, name_index, retain, qos, kind, payload]`

`time` is exact, in one of three forms: an integer is the step in whole
milliseconds from the previous line's time (the first line steps from 0, so
it gives the whole time in ms); a string of digits is the step in ticks of
2^-22 s (every double time from 2004 to 2106 is a whole number of them) from
the previous line's tick count; a number with a fraction is the time itself.
`recv` is `null` (same as the data time), an integer (ms after the data time)
or the exact receive time. Decoding one raw block in Python:

```python
import json, lzma, sqlite3, zlib
db = sqlite3.connect("offwatch-20260504T063000Z.sqlite")
for codec, names, data in db.execute(
        "SELECT codec, names, data FROM raw_block ORDER BY seq_first"):
    names, ms, ticks = json.loads(names), 0, 0
    text = (zlib if codec == "zlib" else lzma).decompress(data).decode("ascii")
    for line in text.split("\n"):
        t, recv, i, sentence = json.loads(line)
        if isinstance(t, int):
            t = (ms + t) / 1000
        elif isinstance(t, str):
            t = (ticks + int(t)) / 2**22
        ms, ticks = round(t * 1000), int(t * 2**22)
        recv = t if recv is None else (ms + recv) / 1000 if isinstance(recv, int) else recv
        print(t, recv, names[i], sentence)
```

(`offwatch` itself reads them with `daemon.outlets.recording.reading.iter_raw` and
`iter_messages`.)

Plain SQL for the alerts: `SELECT datetime(t, 'unixepoch'), alert_id, state,
text FROM alert ORDER BY t`.
"""
