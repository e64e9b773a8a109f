#!/usr/bin/python3
"""rng_reference.py: an independent model of plumbline's generator (core/rng.h).

Written from the published algorithms, not from core/rng.cc, in plain Python
integers masked to 64 bits:

  splitmix64   Steele, Lea & Flood (2014), in the form of Vigna's public-domain
               reference splitmix64.c (prng.di.unimi.it). Written from memory;
               the function body was confirmed against the copy of splitmix64.c
               kept in numpy (numpy/random/src/splitmix64/splitmix64.orig.c).
  xoshiro256++ Blackman & Vigna, "Scrambled linear pseudorandom number
               generators" (2021), reference xoshiro256plusplus.c
               (prng.di.unimi.it). Written from memory; the step and the
               scrambler rotl(s0 + s3, 23) + s0 were confirmed against a
               verbatim copy of the reference file in a public code base.
  bounded      Lemire, "Fast random integer generation in an interval",
               ACM TOMACS 29(1), 2019, algorithm 5 with L = 32: m = x * s,
               l = m mod 2^L; if l < s, t = 2^L mod s and redraw while l < t;
               return floor(m / 2^L). From memory of the paper.

The stream model is the one stated in core/rng.h: lane j of four xoshiro256++
lanes is seeded with splitmix64 outputs 4j..4j+3 of the seed; 64-bit output k
comes from lane k mod 4; next_u32 hands out the low half of a 64-bit output,
then its high half; next_double is (next_u64 >> 11) / 2^53. A 64-bit draw
(next_u64, next_double) discards a pending high half, as the state layout in
core/rng.h (state_type::half) implies.

Protocol: one JSON request on stdin, one JSON document on stdout.
  {"streams":  [{"seed": s, "ops": [op, ...]}, ...],
   "splitmix": [{"seed": s, "count": n}, ...],
   "xoshiro":  [{"state": [s0, s1, s2, s3], "count": n}, ...],
   "chi2_isf": [{"alpha": a, "df": k}, ...],
   "norm_isf": [a, ...]}
  op is ["u64", n], ["u32", n], ["double", n], ["bounded", r, n] (n draws
  of bounded(r)) or ["descending", n, k] (bounded(n), bounded(n - 1), ...,
  k draws: the draws of a partial Fisher-Yates shuffle). For
  "double" the integer numerator k of k / 2^53 is returned, so nothing is
  rounded on the way. Every key is optional; the answer has the same keys,
  each a list with one entry per request entry (for streams: one list of
  values per op). chi2_isf and norm_isf are SciPy's upper-tail quantiles
  (scipy.stats.chi2.isf, scipy.stats.norm.isf), computed live.
"""

import json
import sys

MASK64 = (1 << 64) - 1
MASK32 = (1 << 32) - 1


def rotl64(x, k):
    return ((x << k) | (x >> (64 - k))) & MASK64


class SplitMix64:
    def __init__(self, seed):
        self.x = seed & MASK64

    def next(self):
        self.x = (self.x + 0x9E3779B97F4A7C15) & MASK64
        z = self.x
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK64
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK64
        return z ^ (z >> 31)


class Xoshiro256pp:
    def __init__(self, state):
        self.s = [w & MASK64 for w in state]

    def next(self):
        s = self.s
        result = (rotl64((s[0] + s[3]) & MASK64, 23) + s[0]) & MASK64
        t = (s[1] << 17) & MASK64
        s[2] ^= s[0]
        s[3] ^= s[1]
        s[1] ^= s[2]
        s[0] ^= s[3]
        s[2] ^= t
        s[3] = rotl64(s[3], 45)
        return result


class Stream:
    """The documented output stream of plumbline::rng(seed)."""

    LANES = 4

    def __init__(self, seed):
        sm = SplitMix64(seed)
        self.lanes = []
        for _ in range(self.LANES):
            words = [sm.next() for _ in range(4)]
            if not any(words):  # xoshiro's state must not be all zero
                words[0] = 1
            self.lanes.append(Xoshiro256pp(words))
        self.k = 0  # index of the next 64-bit output
        self.pending_high = None

    def _raw(self):
        value = self.lanes[self.k % self.LANES].next()
        self.k += 1
        return value

    def next_u64(self):
        self.pending_high = None
        return self._raw()

    def next_u32(self):
        if self.pending_high is not None:
            high, self.pending_high = self.pending_high, None
            return high
        x = self._raw()
        self.pending_high = x >> 32
        return x & MASK32

    def bounded(self, s):
        if not 1 <= s <= MASK32:
            raise ValueError("bounded range must be in [1, 2^32)")
        m = self.next_u32() * s
        low = m & MASK32
        if low < s:
            t = (1 << 32) % s
            while low < t:
                m = self.next_u32() * s
                low = m & MASK32
        return m >> 32

    def double_numerator(self):
        return self.next_u64() >> 11


def run_ops(seed, ops):
    g = Stream(seed)
    out = []
    for op in ops:
        kind = op[0]
        if kind == "u64":
            out.append([g.next_u64() for _ in range(op[1])])
        elif kind == "u32":
            out.append([g.next_u32() for _ in range(op[1])])
        elif kind == "double":
            out.append([g.double_numerator() for _ in range(op[1])])
        elif kind == "bounded":
            out.append([g.bounded(op[1]) for _ in range(op[2])])
        elif kind == "descending":  # bounded(n), bounded(n - 1), ..., k draws
            out.append([g.bounded(op[1] - i) for i in range(op[2])])
        else:
            raise ValueError("unknown op " + repr(kind))
    return out


def main():
    request = json.load(sys.stdin)
    answer = {}
    if "streams" in request:
        answer["streams"] = [run_ops(s["seed"], s["ops"]) for s in request["streams"]]
    if "splitmix" in request:
        answer["splitmix"] = []
        for item in request["splitmix"]:
            sm = SplitMix64(item["seed"])
            answer["splitmix"].append([sm.next() for _ in range(item["count"])])
    if "xoshiro" in request:
        answer["xoshiro"] = []
        for item in request["xoshiro"]:
            g = Xoshiro256pp(item["state"])
            answer["xoshiro"].append([g.next() for _ in range(item["count"])])
    if "chi2_isf" in request or "norm_isf" in request:
        from scipy import stats

        if "chi2_isf" in request:
            answer["chi2_isf"] = [
                float(stats.chi2.isf(c["alpha"], c["df"])) for c in request["chi2_isf"]
            ]
        if "norm_isf" in request:
            answer["norm_isf"] = [float(stats.norm.isf(a)) for a in request["norm_isf"]]
    json.dump(answer, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
