#!/usr/bin/python3
"""measure_false_alarms.py: the in-control false-alarm rate of a daemon setup.

Starts `plumbline serve` (built-in defaults unless --config is given) on
loopback with port 0, feeds it an in-control scenario with
`plumbline-sim send --speed`, waits until every record is read and every
evaluation is done, scores the alarm history with `plumbline-sim score`, and
prints false alarms per 10,000 in-control samples and per stream-hour, each
with an exact Poisson 95 % interval (Garwood 1936: chi-square quantiles,
scipy.stats.chi2). It also prints how many evaluation requests the daemon
merged because it fell behind (plumbline_evaluations_coalesced_total): merged
requests mean fewer evaluations, so a rate measured with many of them is
biased low; lower --speed until there are few or none.

Usage (from the source tree, after building plumbline and plumbline-sim):
  nice -n 19 /usr/bin/python3 simulator/measure_false_alarms.py \
      --build build --duration 5000 --speed 10
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

from scipy import stats


def poisson_interval(k, level=0.95):
    a = 1 - level
    lo = 0.0 if k == 0 else stats.chi2.ppf(a / 2, 2 * k) / 2
    hi = stats.chi2.ppf(1 - a / 2, 2 * k + 2) / 2
    return lo, hi


def get(port, path):
    with urllib.request.urlopen(f"http://127.0.0.1:{port}{path}", timeout=30) as r:
        return r.read().decode()


def metric_sum(text, name):
    total = 0.0
    for line in text.splitlines():
        if line.startswith(name + " ") or line.startswith(name + "{"):
            total += float(line.rsplit(" ", 1)[1])
    return total


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    p.add_argument("--build", default=os.path.join(here, "..", "build"))
    p.add_argument("--scenario", default=os.path.join(here, "scenarios", "in_control.toml"))
    p.add_argument("--config", help="daemon configuration (default: built-in defaults)")
    p.add_argument("--duration", type=float, default=600, help="simulated seconds")
    p.add_argument("--speed", type=float, default=10)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--json", action="store_true")
    a = p.parse_args()
    # SIGTERM ends the run as Ctrl-C does: the finally clauses stop the daemon.
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(143))
    plumbline = os.path.join(a.build, "daemon", "plumbline")
    sim = os.path.join(a.build, "simulator", "plumbline-sim")
    with tempfile.TemporaryDirectory(prefix="plumbline-fa-") as tmp:
        args = [plumbline, "serve", "--ingest", "127.0.0.1:0", "--http", "127.0.0.1:0",
                "--log-level", "error"]
        if a.config:
            args += ["--config", a.config]
        daemon = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        try:
            ready = daemon.stdout.readline()
            m = re.search(r"ingest_tcp=[^ ]*:(\d+) .*http=[^ ]*:(\d+)", ready)
            if not m:
                sys.exit(f"the daemon did not get ready: {ready!r}")
            tcp, http = m.group(1), m.group(2)
            truth = os.path.join(tmp, "truth.json")
            t0 = time.time()
            subprocess.run([sim, "send", "--scenario", a.scenario, "--seed", str(a.seed),
                            "--duration", str(a.duration), "--speed", str(a.speed),
                            "--to", f"127.0.0.1:{tcp}", "--truth", truth], check=True)
            send_seconds = time.time() - t0
            with open(truth) as f:
                t = json.load(f)
            streams = len(t["streams"])
            # Every record read and every evaluation finished.
            deadline = time.time() + 300
            while True:
                page = json.loads(get(http, "/api/streams?limit=10000"))
                if page["total"] == streams and all(s["evaluation_state"] == "idle"
                                                    for s in page["streams"]):
                    total = sum(s["samples_total"] for s in page["streams"])
                    time.sleep(1)
                    page = json.loads(get(http, "/api/streams?limit=10000"))
                    if sum(s["samples_total"] for s in page["streams"]) == total:
                        break
                if time.time() > deadline:
                    sys.exit("the daemon did not settle within 300 s")
                time.sleep(0.5)
            metrics = get(http, "/metrics")
            score = json.loads(subprocess.run(
                [sim, "score", "--truth", truth, "--daemon", f"127.0.0.1:{http}", "--json"],
                check=True, capture_output=True, text=True).stdout)
        finally:
            daemon.send_signal(signal.SIGTERM)
            daemon.wait(timeout=60)
    k = score["false_alarms"]
    samples = score["in_control_samples"]
    hours = score["in_control_stream_hours"]
    lo, hi = poisson_interval(k)
    out = {
        "scenario": os.path.relpath(a.scenario),
        "config": a.config or "built-in defaults",
        "streams": streams,
        "simulated_seconds": a.duration,
        "speed": a.speed,
        "send_wall_seconds": round(send_seconds, 1),
        "samples_accepted": int(metric_sum(metrics, "plumbline_samples_total")),
        "evaluations": int(metric_sum(metrics, "plumbline_evaluations_total")),
        "evaluations_coalesced": int(metric_sum(metrics, "plumbline_evaluations_coalesced_total")),
        "false_alarms": k,
        "in_control_samples": samples,
        "in_control_stream_hours": hours,
        "per_10000_samples": 1e4 * k / samples,
        "per_10000_samples_95": [1e4 * lo / samples, 1e4 * hi / samples],
        "per_stream_hour": k / hours,
        "per_stream_hour_95": [lo / hours, hi / hours],
    }
    if a.json:
        print(json.dumps(out, indent=2))
        return
    print(f"scenario {out['scenario']}, {streams} streams, {a.duration:g} simulated s at speed "
          f"{a.speed:g} ({out['send_wall_seconds']} s to send); daemon: {out['config']}")
    print(f"samples accepted {out['samples_accepted']}, evaluations {out['evaluations']}, "
          f"coalesced requests {out['evaluations_coalesced']}")
    print(f"false alarms {k} in {samples} in-control samples, {hours:.2f} stream-hours")
    print(f"  per 10,000 samples  {out['per_10000_samples']:.4f}  (95 % {out['per_10000_samples_95'][0]:.4f}"
          f" .. {out['per_10000_samples_95'][1]:.4f})")
    print(f"  per stream-hour     {out['per_stream_hour']:.4f}  (95 % {out['per_stream_hour_95'][0]:.4f}"
          f" .. {out['per_stream_hour_95'][1]:.4f})")


if __name__ == "__main__":
    main()
