#!/usr/bin/python3
"""wire_reference.py: Python's readings of wire-format times and numbers.

Run by tests/unit/wire_test.cc under Debian's /usr/bin/python3. Nothing here
shares code with daemon/wire.cc; each answer comes from the standard library:

  date_times   RFC 3339 date-times. The date, time and offset are read by
               datetime.strptime(..., "%Y-%m-%dT%H:%M:%S%z"), which checks
               the calendar (month lengths, Gregorian leap years) and the
               clock fields; the whole seconds since the epoch come from
               datetime subtraction. The fraction is added exactly with
               fractions.Fraction and float(Fraction) rounds once, correctly.
               The 't', 'z' and space spellings allowed by RFC 3339 5.6 are
               normalised to 'T' and 'Z' first. A seconds field of 60 (which
               datetime rejects) is read as 59 plus one second, and accepted
               only if that lands on 00:00:00 UTC, i.e. the text named
               23:59:60 UTC: the mapping daemon/wire.h documents, and the
               value the POSIX Seconds Since the Epoch formula gives for
               tm_sec = 60 (calendar.timegm is checked to agree).
               Out of the accepted range [0, 253402300800) -> None.
  unix_seconds float(text), correctly rounded; out of range -> None.
  values       float(text) (correctly rounded, CPython's dtoa.c), with the
               outcome: "ok", "overflow" (float gives inf) or "underflow" (a
               nonzero decimal that float gives as zero).

Protocol: one JSON object on stdin,
  {"date_times": [text, ...], "unix_seconds": [text, ...], "values": [text, ...]}
and one JSON object on stdout with the same keys, each a list in the same
order. A double is sent as its IEEE 754 bit pattern (an unsigned 64-bit
integer), so no decimal conversion stands between Python and the test.
"""

import calendar
import json
import re
import struct
import sys
from datetime import datetime, timedelta, timezone
from fractions import Fraction

LIMIT = 253402300800
EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
PATTERN = re.compile(r"^(\d{4}-\d{2}-\d{2})[Tt ](\d{2}:\d{2}):(\d{2})(?:\.(\d+))?([Zz]|[+-]\d{2}:\d{2})$")


def bits(x):
    return struct.unpack("<Q", struct.pack("<d", x))[0]


def date_time(text):
    m = PATTERN.match(text)
    if not m:
        return None
    date, hour_minute, second, fraction, offset = m.groups()
    offset = "Z" if offset in ("Z", "z") else offset
    leap = second == "60"
    try:
        dt = datetime.strptime(
            "%sT%s:%s%s" % (date, hour_minute, "59" if leap else second, offset),
            "%Y-%m-%dT%H:%M:%S%z",
        )
        utc = dt.astimezone(timezone.utc) + (timedelta(seconds=1) if leap else timedelta(0))
    except (ValueError, OverflowError):
        return None
    if leap:
        if (utc.hour, utc.minute, utc.second) != (0, 0, 0):
            return None
        before = utc - timedelta(seconds=1)
        t = (before.year, before.month, before.day, 23, 59, 60)
        assert calendar.timegm(t) == (utc - EPOCH) // timedelta(seconds=1)
    whole = (utc - EPOCH) // timedelta(seconds=1)
    exact = Fraction(whole)
    if fraction:
        exact += Fraction(int(fraction), 10 ** len(fraction))
    value = float(exact)
    if not (0 <= value < LIMIT):
        return None
    return bits(value)


def unix_seconds(text):
    value = float(text)
    if not (0 <= value < LIMIT):
        return None
    return bits(value)


def value(text):
    x = float(text)
    if x in (float("inf"), float("-inf")):
        return {"outcome": "overflow"}
    mantissa = re.split("[eE]", text)[0]
    if x == 0 and any(c in "123456789" for c in mantissa):
        return {"outcome": "underflow"}
    return {"outcome": "ok", "bits": bits(x)}


def main():
    request = json.load(sys.stdin)
    answer = {
        "date_times": [date_time(t) for t in request.get("date_times", [])],
        "unix_seconds": [unix_seconds(t) for t in request.get("unix_seconds", [])],
        "values": [value(t) for t in request.get("values", [])],
    }
    json.dump(answer, sys.stdout)


if __name__ == "__main__":
    main()
