#!/usr/bin/python3
"""The daemon's ingest benchmark: a real `plumbline serve` over loopback TCP.

Three parts, in one run:

  1. In process (plumbline_bench_ingest): the daemon's ingest path without
     sockets, beside the bare loop (parse, open-addressing map, ring append)
     and the same loop with std::unordered_map; one thread and two.
  2. Ingest alone: `plumbline serve` with evaluations off, fed by
     `plumbline-sim load` over 4 TCP connections with 10,000 streams as fast
     as it accepts. (A group must have a cadence, so this one has a timer
     of an hour, which evaluates each stream once when its windows first
     fill: the warm-up fills every window and waits for those evaluations,
     and none runs while ingest is timed.) Reports records/s, checks that every record sent was
     accepted (plumbline_records_total), and the daemon's resident memory
     (VmRSS) against the raw window bytes (streams x (reference + recent)
     x 8 bytes x dimension).
  3. With evaluations: every stream evaluated every 1,000 samples with the
     built-in tests (Anderson-Darling, 999 resamples with sequential stopping
     after 20 exceedances; a 95 % BCa mean-difference interval, 999
     resamples), the sender paced at --rate records/s. Reports the rate held,
     evaluations run and coalesced, and the evaluation latency percentiles
     (request to result, queueing included) from the daemon's histogram
     plumbline_evaluation_latency_seconds, interpolated within its buckets.

Targets (issue: daemon benchmark, this 2-core machine):
  ingest alone          >= 8,000,000 records/s, no loss
  with evaluations      >= 1,000,000 records/s sustained, latency p99 <= 1 s
  resident memory       <= 1.5 x the raw window bytes

Note that the sender runs on the same two cores as the daemon.

Usage: /usr/bin/python3 tests/bench/ingest_bench.py BUILD_DIR [--quick]
          [--seconds S] [--rate R] [--streams N]
"""
import argparse
import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
import urllib.request

STREAMS = 10_000
CONNECTIONS = 4
REFERENCE = 500  # the built-in defaults; --reference / --recent change them
RECENT = 100


def config_text(every_samples, reference, recent):
    # "Evaluations off": the count cadence off and a timer of an hour (a
    # group must have some cadence). The timer evaluates each stream once,
    # as soon as its windows are full, and not again within the run.
    every_seconds = 3600 if every_samples == 0 else 0
    return f"""# ingest benchmark ({'evaluations off' if every_samples == 0 else 'evaluations on'})
[ingest]
max_streams = 20000

[evaluation]
seed = 1

[[group]]
name = "bench"
match = "*"
reference_size = {reference}
recent_size = {recent}
every_samples = {every_samples}
every_seconds = {every_seconds}
"""


class Daemon:
    def __init__(self, build, config_path, log_path):
        self.log = open(log_path, "w")
        self.proc = subprocess.Popen(
            [os.path.join(build, "daemon", "plumbline"), "serve", "--config", config_path,
             "--ingest", "127.0.0.1:0", "--http", "127.0.0.1:0", "--log-level", "warn"],
            stdout=subprocess.PIPE, stderr=self.log, text=True)
        line = self.proc.stdout.readline()
        m = re.search(r"ingest_tcp=127\.0\.0\.1:(\d+) .*http=127\.0\.0\.1:(\d+)", line)
        if not m:
            self.stop()
            sys.exit(f"ingest_bench: no ready line from plumbline serve (got {line!r})")
        self.ingest_port, self.http_port = int(m.group(1)), int(m.group(2))

    def metrics(self):
        with urllib.request.urlopen(f"http://127.0.0.1:{self.http_port}/metrics",
                                    timeout=30) as r:
            return r.read().decode()

    def value(self, text, name):
        m = re.search(rf"^{name} ([0-9.e+-]+)$", text, re.M)
        return float(m.group(1)) if m else 0.0

    def histogram(self, text, name):
        """{le: cumulative count} of an unlabelled histogram."""
        out = {}
        for m in re.finditer(rf'^{name}_bucket{{le="([^"]+)"}} ([0-9.e+-]+)$', text, re.M):
            out[float("inf") if m.group(1) == "+Inf" else float(m.group(1))] = float(m.group(2))
        return out

    def cpu_seconds(self):
        """User + system CPU time of the daemon so far (all its threads)."""
        with open(f"/proc/{self.proc.pid}/stat") as f:
            fields = f.read().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")

    def rss_bytes(self):
        with open(f"/proc/{self.proc.pid}/status") as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) * 1024
        return 0

    def wait_records(self, expected, timeout=60):
        """Waits until plumbline_records_total reaches `expected` or stops growing."""
        deadline = time.monotonic() + timeout
        last, still = -1.0, 0
        while time.monotonic() < deadline:
            n = self.value(self.metrics(), "plumbline_records_total")
            if n >= expected:
                return n
            still = still + 1 if n == last else 0
            if still >= 10:
                return n
            last = n
            time.sleep(0.2)
        return last

    def wait_evaluations(self, expected, timeout=120):
        """Waits until the streams' evaluations add up to `expected` and the
        queue is empty."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            text = self.metrics()
            done = sum(float(m.group(1)) for m in re.finditer(
                r'^plumbline_evaluations_total{[^}]*} ([0-9.e+-]+)$', text, re.M))
            if done >= expected and self.value(text, "plumbline_evaluation_queue_length") == 0:
                return
            time.sleep(0.5)
        sys.exit(f"ingest_bench: {expected} evaluations did not finish")

    def wait_queue_empty(self, timeout=120):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.value(self.metrics(), "plumbline_evaluation_queue_length") == 0:
                return
            time.sleep(0.5)
        sys.exit("ingest_bench: the evaluation queue did not drain")

    def stop(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self.log.close()


def run_load(build, port, streams, seconds=None, records=None, rate=0, stagger=0):
    cmd = [os.path.join(build, "simulator", "plumbline-sim"), "load",
           "--to", f"127.0.0.1:{port}", "--streams", str(streams),
           "--connections", str(CONNECTIONS), "--json"]
    if seconds is not None:
        cmd += ["--duration", str(seconds)]
    if records is not None:
        cmd += ["--records", str(records), "--duration", "600"]
    if rate:
        cmd += ["--rate", str(rate)]
    if stagger:
        cmd += ["--stagger", str(stagger)]
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    return json.loads(out)


def percentile(before, after, q):
    """q-quantile of the observations between two scrapes of a histogram,
    linear within its bucket (as PromQL's histogram_quantile does)."""
    les = sorted(after)
    counts = [after[le] - before.get(le, 0.0) for le in les]
    total = counts[-1]
    if total <= 0:
        return float("nan"), 0
    rank = q * total
    lower_le, lower_count = 0.0, 0.0
    for le, c in zip(les, counts):
        if c >= rank:
            if le == float("inf"):
                return lower_le, total  # beyond the last finite bucket: report its bound
            return lower_le + (le - lower_le) * (rank - lower_count) / max(c - lower_count, 1e-12), total
        lower_le, lower_count = le, c
    return float("nan"), total


def share_within(before, after, bound):
    les = sorted(after)
    total = after[les[-1]] - before.get(les[-1], 0.0)
    return (after[bound] - before.get(bound, 0.0)) / total if total else float("nan")


def loadavg():
    with open("/proc/loadavg") as f:
        return f.read().split()[0]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("build")
    ap.add_argument("--quick", action="store_true", help="short runs (noisy; not for figures)")
    ap.add_argument("--seconds", type=float, default=None, help="length of each timed run")
    ap.add_argument("--rate", type=float, default=1_000_000,
                    help="paced rate of the run with evaluations, records/s")
    ap.add_argument("--streams", type=int, default=STREAMS)
    ap.add_argument("--reference", type=int, default=REFERENCE, help="reference window size")
    ap.add_argument("--recent", type=int, default=RECENT, help="recent window size")
    ap.add_argument("--parts", default="1,2,3", help="which parts to run, e.g. 2,3")
    ap.add_argument("--no-in-process", action="store_true",
                    help="leave out part 1 (the in-process baselines)")
    args = ap.parse_args()
    # SIGTERM ends the run as Ctrl-C does: the finally clauses stop the daemon.
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(143))
    seconds = args.seconds or (3 if args.quick else 10)
    streams = args.streams
    print(f"load average before: {loadavg()}")

    # 1. In process.
    parts = {int(p) for p in args.parts.split(",")}
    if args.no_in_process:
        parts.discard(1)
    if 1 in parts:
        out = subprocess.run([os.path.join(args.build, "tests", "bench",
                                           "plumbline_bench_ingest"),
                              "--streams", str(streams), "--rounds", "3" if args.quick else "5"],
                             check=True, capture_output=True, text=True).stdout
        print(out, end="", flush=True)

    reference, recent = args.reference, args.recent
    raw_window_bytes = streams * (reference + recent) * 8
    fill = streams * (reference + recent + 100)  # every window full, before timing
    print(f"windows: reference {reference}, recent {recent} samples per stream")
    with tempfile.TemporaryDirectory() as tmp:
        if 2 in parts:
            part_alone(args, tmp, streams, seconds, reference, recent, fill, raw_window_bytes)
        if 3 in parts:
            part_evaluations(args, tmp, streams, seconds, reference, recent, fill,
                             raw_window_bytes)
    print(f"\nload average after: {loadavg()}")


def part_alone(args, tmp, streams, seconds, reference, recent, fill, raw_window_bytes):
    # 2. Ingest alone.
    cfg = os.path.join(tmp, "off.toml")
    with open(cfg, "w") as f:
        f.write(config_text(0, reference, recent))
    d = Daemon(args.build, cfg, os.path.join(tmp, "off.log"))
    try:
        warm = run_load(args.build, d.ingest_port, streams, records=fill)
        d.wait_records(warm["records_sent"])
        d.wait_evaluations(streams)  # the timer's one evaluation per stream
        cpu0, wall0 = d.cpu_seconds(), time.monotonic()
        r = run_load(args.build, d.ingest_port, streams, seconds=seconds)
        daemon_cpu, wall = d.cpu_seconds() - cpu0, time.monotonic() - wall0
        expected = warm["records_sent"] + r["records_sent"]
        got = d.wait_records(expected)
        rate = r["records_sent"] / r["seconds"]
        rss = d.rss_bytes()
        text = d.metrics()
        rejected = sum(float(m.group(1)) for m in re.finditer(
            r'^plumbline_lines_rejected_total{[^}]*} ([0-9.e+-]+)$', text, re.M))
    finally:
        d.stop()
    print(f"\ningest alone: {streams} streams, {CONNECTIONS} connections, {seconds:g} s")
    print(f"  {rate / 1e6:.2f} M records/s (target >= 8.00)  ratio {rate / 8e6:.2f}")
    print(f"  the daemon used {daemon_cpu / wall:.2f} cores over the sender's run (the sender and"
          f" the kernel's loopback the rest): {r['records_sent'] / daemon_cpu / 1e6:.2f} M records"
          f" per daemon CPU-second")
    print(f"  sent {expected:.0f}, accepted {got:.0f}, rejected {rejected:.0f}"
          f"  ({'no loss' if got == expected and rejected == 0 else 'LOSS'})")
    print(f"  resident memory {rss / 2**20:.1f} MiB; raw window bytes "
          f"{raw_window_bytes / 2**20:.1f} MiB; ratio {rss / raw_window_bytes:.2f}"
          f" (target <= 1.50)")



def part_evaluations(args, tmp, streams, seconds, reference, recent, fill, raw_window_bytes):
    # At least three evaluation cycles of every stream (a cycle is 1000
    # samples of each stream at the paced rate).
    eval_seconds = max(2 * seconds, 3 * 1000 * streams / args.rate)
    # 3. With evaluations, paced.
    cfg = os.path.join(tmp, "on.toml")
    with open(cfg, "w") as f:
        f.write(config_text(1000, reference, recent))
    d = Daemon(args.build, cfg, os.path.join(tmp, "on.log"))
    try:
        # Stagger the streams by up to 1000 samples, so that their count
        # cadences are spread over the cycle as in a real fleet (the load
        # sender feeds all streams in lockstep, which would otherwise make
        # every stream ask for an evaluation at the same moment).
        warm = run_load(args.build, d.ingest_port, streams, records=fill, stagger=1000)
        warm["records_sent"] += warm["stagger_records"]
        d.wait_records(warm["records_sent"])
        # Every window just became full, so every stream asked for its first
        # evaluation at once: let that queue drain before the clock starts.
        d.wait_queue_empty()
        time.sleep(1)
        t0 = d.metrics()
        h0 = d.histogram(t0, "plumbline_evaluation_latency_seconds")
        c0 = d.value(t0, "plumbline_evaluations_coalesced_total")
        n0 = d.value(t0, "plumbline_evaluation_latency_seconds_count")
        w0 = d.value(t0, "plumbline_evaluation_seconds_sum")
        cpu0 = d.cpu_seconds()
        r = run_load(args.build, d.ingest_port, streams, seconds=eval_seconds, rate=args.rate)
        daemon_cpu = d.cpu_seconds() - cpu0
        expected = warm["records_sent"] + r["records_sent"]
        got = d.wait_records(expected)
        time.sleep(1)
        t1 = d.metrics()
        h1 = d.histogram(t1, "plumbline_evaluation_latency_seconds")
        c1 = d.value(t1, "plumbline_evaluations_coalesced_total")
        n1 = d.value(t1, "plumbline_evaluation_latency_seconds_count")
        w1 = d.value(t1, "plumbline_evaluation_seconds_sum")
        rss_on = d.rss_bytes()
    finally:
        d.stop()
    rate_on = r["records_sent"] / r["seconds"]
    p50, evals = percentile(h0, h1, 0.50)
    p90, _ = percentile(h0, h1, 0.90)
    p99, _ = percentile(h0, h1, 0.99)
    within_1s = share_within(h0, h1, 1.0)
    print(f"\nwith evaluations every 1000 samples, paced at {args.rate / 1e6:.2f} M records/s,"
          f" {eval_seconds:g} s")
    print(f"  {rate_on / 1e6:.2f} M records/s held (target >= 1.00); sent {expected:.0f},"
          f" accepted {got:.0f} ({'no loss' if got == expected else 'LOSS'})")
    print(f"  evaluations {n1 - n0:.0f} ({(n1 - n0) / eval_seconds:.0f}/s),"
          f" coalesced {c1 - c0:.0f}")
    if n1 > n0:
        print(f"  one evaluation took {(w1 - w0) / (n1 - n0) * 1e3:.2f} ms of wall time on average;"
              f" the daemon used {daemon_cpu / eval_seconds:.2f} cores")
    print(f"  latency p50 {p50 * 1e3:.1f} ms, p90 {p90 * 1e3:.1f} ms, p99 {p99 * 1e3:.1f} ms"
          f" (target p99 <= 1000 ms); share within 1 s: {within_1s:.4f}")
    print(f"  resident memory {rss_on / 2**20:.1f} MiB; ratio to raw window bytes"
          f" {rss_on / raw_window_bytes:.2f}")


if __name__ == "__main__":
    main()
