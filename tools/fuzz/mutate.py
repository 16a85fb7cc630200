"""Lines that look almost right: mutations of real sentences, checksums made good again.

A fuzzer that only sends noise tests the checksum and nothing behind it. These
mutations keep a line well-formed where it matters (start character, address,
a correct checksum, often a TAG block) and break what is inside: numbers blown
up to twenty digits, signs, exponents, NaN and infinity, empty and extra fields,
fields swapped, units and hemispheres changed, times and dates out of range,
TAG times from any century. Each mutator is plain ``random.Random`` driven, so a
seed gives the same lines again.
"""

from __future__ import annotations

import random

from daemon.nmea0183.codec import checksum_hex

NUMBERS = ("0", "-0", "1e308", "-1e308", "1e-320", "nan", "inf", "-inf", "99999999999999999999",
           "-99999999999999999999", "360", "360.0000001", "-0.0", "00", "1.2.3", "+5", "0x10", "", " ",
           "60.999", "61", "235960", "999999", "1_000", "١٢")
LETTERS = ("A", "V", "N", "S", "E", "W", "T", "M", "R", "K", "B", "P", "C", "D", "f", "F", "I", "", "Z", "**")
TAG_TIMES = ("0", "1e19", "300000000000000", "-5", "nan", "inf", "1777867200000", "1777867200",
             "315964799", "4102444801", "1e400", "99999999999", "100000000001", "", "1.5e12")


def reframe(body: str, start: str = "$") -> str:
    """A sentence from its body with a correct checksum (any checksum where the body is not ASCII)."""
    return f"{start}{body}*{checksum_hex(body) if body.isascii() else '00'}"


def body_of(line: str) -> tuple[str, str, str]:
    """(TAG prefix or "", start character, body without checksum) of a seed line."""
    tag = ""
    if line.startswith("\\"):
        close = line.find("\\", 1)
        if close > 0:
            tag, line = line[:close + 1], line[close + 1:]
    start, rest = line[:1], line[1:]
    star = rest.rfind("*")
    return tag, start, rest[:star] if star >= 0 else rest


def _mutate_fields(rng: random.Random, fields: list[str]) -> list[str]:
    if len(fields) < 2:
        return fields + [rng.choice(NUMBERS)]
    i = rng.randrange(1, len(fields))
    op = rng.randrange(7)
    if op == 0:
        fields[i] = rng.choice(NUMBERS)
    elif op == 1:
        fields[i] = rng.choice(LETTERS)
    elif op == 2:
        j = rng.randrange(1, len(fields))
        fields[i], fields[j] = fields[j], fields[i]
    elif op == 3:
        del fields[i:]
    elif op == 4:
        fields[i:i] = [rng.choice(NUMBERS + LETTERS) for _ in range(rng.randrange(1, 30))]
    elif op == 5:
        f = fields[i]
        if f:
            k = rng.randrange(len(f))
            fields[i] = f[:k] + rng.choice("0123456789.-+eE ,") + f[k + 1:]
    else:
        fields[i] = fields[i] * rng.randrange(2, 40)
    return fields


def _tag(rng: random.Random) -> str:
    pairs = []
    if rng.random() < 0.9:
        pairs.append(f"c:{rng.choice(TAG_TIMES)}")
    if rng.random() < 0.5:
        pairs.append(f"s:{rng.choice(('gnss', '', 'x' * 80, 'a:b', 'a,b'))}")
    if rng.random() < 0.1:
        pairs.append(rng.choice(("n:12", "g:1-2-3", ":", "c", "zz:zz")))
    body = ",".join(pairs)
    check = checksum_hex(body) if rng.random() < 0.9 else "ZZ"
    return f"\\{body}*{check}\\"


def mutate(rng: random.Random, line: str) -> str:
    """One mutated line from a seed line."""
    tag, start, body = body_of(line)
    fields = body.split(",")
    for _ in range(rng.randrange(1, 4)):
        fields = _mutate_fields(rng, fields)
    out = reframe(",".join(fields), start or "$")
    r = rng.random()
    if r < 0.15:
        out = _tag(rng) + out
    elif r < 0.6 and tag:
        out = tag + out
    if rng.random() < 0.02:
        k = rng.randrange(len(out) + 1)
        out = out[:k]  # cut short: no checksum, or half of one
    return out


def stream(rng: random.Random, seeds: list[str], n: int) -> list[str]:
    """``n`` lines: mostly mutants, some seeds unchanged (so the clock and estimators run)."""
    return [mutate(rng, s) if rng.random() < 0.7 else s for s in (rng.choice(seeds) for _ in range(n))]
