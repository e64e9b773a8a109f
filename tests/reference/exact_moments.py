#!/usr/bin/python3
"""exact_moments.py: exact mean and standard deviation of binary64 values.

Each value is taken exactly as the binary64 number it is (fractions.Fraction
of a Python float is exact), so the mean and the unbiased variance (divisor
n - 1) are exact rationals. They are reported rounded to 40 significant
digits; the standard deviation is the decimal module's correctly rounded
square root of that 40-digit variance, so it is within a relative 1e-39 of
the exact one. The results are therefore the true moments of the
numbers a binary64 program holds, free of any rounding in the computation:
the yardstick for "no accuracy lost beyond the representation of the data".

Protocol: one JSON request on stdin, one JSON document on stdout.
  request   {"values": [x, ...]}        JSON numbers; Python's json parses
                                         each to the nearest binary64, which
                                         is the double the sender printed when
                                         it printed 17 significant digits
            or {"values_hex": ["0x1.8p+0", ...]}   float.hex() strings
  response  {"n": n, "mean": "...", "variance": "...", "sd": "..."}
            decimal strings with 40 significant digits; variance and sd are
            "0" when n < 2.
Errors (no values, a non-finite value) exit with a non-zero status.
"""
import decimal
import json
import math
import sys
from fractions import Fraction

DIGITS = 40


def to_decimal(q: Fraction) -> decimal.Decimal:
    return decimal.Decimal(q.numerator) / decimal.Decimal(q.denominator)


def main() -> int:
    request = json.load(sys.stdin)
    if "values_hex" in request:
        values = [float.fromhex(v) for v in request["values_hex"]]
    else:
        values = [float(v) for v in request["values"]]
    if not values:
        print("no values", file=sys.stderr)
        return 2
    if not all(math.isfinite(v) for v in values):
        print("non-finite value", file=sys.stderr)
        return 2
    decimal.getcontext().prec = DIGITS
    xs = [Fraction(v) for v in values]
    n = len(xs)
    mean = sum(xs) / n
    if n >= 2:
        var = sum((x - mean) ** 2 for x in xs) / (n - 1)
    else:
        var = Fraction(0)
    var_dec = to_decimal(var)
    out = {
        "n": n,
        "mean": str(to_decimal(mean)),
        "variance": str(var_dec),
        "sd": str(var_dec.sqrt()),
    }
    json.dump(out, sys.stdout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
