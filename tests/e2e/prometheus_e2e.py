#!/usr/bin/python3
"""prometheus_e2e.py: a real Prometheus server scraping a real `plumbline serve`.

    prometheus_e2e.py --plumbline BIN --plumbline-sim BIN --scenario FILE
                      --rules plumbline_rules.yml --scrape-config prometheus.yml
                      [--speed X] [--deadline SECONDS]

The test starts, on loopback and free ports:

  1. `plumbline serve` with a small configuration (windows of 200 and 50
     samples, an Anderson-Darling test every 25 samples), so that an alarm
     comes within seconds of the fault;
  2. `prometheus` (Debian 12's package, 2.42) with temporary storage,
     scraping the daemon every second and evaluating the rules every second.
     Its configuration is deploy/prometheus/prometheus.yml with the target
     and the intervals changed, and its rules are a copy of
     deploy/prometheus/plumbline_rules.yml in which every `for:` hold is
     shortened to FOR_HOLD (a test-only copy: the shipped holds are minutes).
     Everything else in the rules is as shipped.

It then runs `plumbline-sim send` with --scenario (fillers_step.toml: four
filler heads of the invented Larkspur Dairy's cup line B, invented data, one
of them with a step shift after its baseline) at --speed simulated seconds
per wall second, and asks Prometheus's HTTP API until the PlumblineAlarm
alert is firing for the faulted head. Throughout, no PlumblineAlarm alert (pending or
firing) may appear for another head, and after it fires the others must stay
inactive for a few more rule evaluations. Last, the drift band series
plumbline_drift_lower and plumbline_drift_upper must be stored for the
faulted head, with a band above zero (the injected shift is positive), and
`plumbline-sim score` must find the fault detected and no false alarm.

Every process is started and stopped here, by PID: SIGTERM, a bounded wait,
then SIGKILL. The daemon must exit 0 on SIGTERM. The temporary directory is
removed. The whole run is bounded by --deadline.
"""
import argparse
import json
import os
import selectors
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.parse
import urllib.request

import yaml  # Debian's python3-yaml

FOR_HOLD = "3s"  # test-only `for:` of every rule (shipped: minutes)
# The streams of fillers_step.toml; the test reads its fault from the truth
# file that `plumbline-sim send` writes, and checks it is this one.
STREAMS = ["larkspur.line_b.filler.head_%d" % i for i in (1, 2, 3, 4)]
FAULTED = "larkspur.line_b.filler.head_3"
CAUTION = "no safety interlock"

# Small windows: the first evaluation comes after 250 samples, then one every
# 25; the alarm is raised after 2 signals in a row.
DAEMON_CONFIG = """\
# Test configuration of prometheus_e2e.py (invented Larkspur Dairy, cup line B).
[evaluation]
threads = 2
seed = 11

[[group]]
name = "line_b_fill"
match = "larkspur.line_b.filler.head_*"
reference = "baseline"
reference_size = 200
recent_size = 50
every_samples = 25
tests = ["ad"]
alpha = 0.005
resamples = 999
stop_after = 20
raise_after = 2
clear_after = 3
interval = "mean-diff"
interval_method = "bca"
interval_resamples = 499
"""


class Failure(Exception):
    pass


def check(cond, message):
    if not cond:
        raise Failure(message)


# --- Processes ---------------------------------------------------------------

class Process:
    """A child process, stopped by PID: SIGTERM, wait, SIGKILL after a timeout."""

    def __init__(self, name, argv, log_path, stdout=subprocess.DEVNULL):
        self.name = name
        self.log_path = log_path
        self.log = open(log_path, "wb")
        self.proc = subprocess.Popen(argv, stdin=subprocess.DEVNULL, stdout=stdout,
                                     stderr=self.log)
        print("started %s, pid %d: %s" % (name, self.proc.pid, " ".join(argv)))

    def stop(self, timeout=15):
        """Returns the exit code, or None when it had to be killed."""
        code = self.proc.poll()
        if code is None:
            os.kill(self.proc.pid, signal.SIGTERM)
            try:
                code = self.proc.wait(timeout=timeout)
            except subprocess.TimeoutExpired:
                print("%s (pid %d) did not stop within %d s; killing it" %
                      (self.name, self.proc.pid, timeout))
                os.kill(self.proc.pid, signal.SIGKILL)
                self.proc.wait()
                code = None
        self.log.close()
        if self.proc.stdout:
            self.proc.stdout.close()
        print("stopped %s (pid %d): exit %s" % (self.name, self.proc.pid, code))
        return code

    def log_text(self):
        if not self.log.closed:
            self.log.flush()
        with open(self.log_path, "rb") as f:
            return f.read().decode(errors="replace")


def read_ready_line(proc, deadline):
    """The daemon's `plumbline ready ...` line, as a dict of its fields."""
    sel = selectors.DefaultSelector()
    sel.register(proc.stdout, selectors.EVENT_READ)
    line = b""
    while not line.endswith(b"\n"):
        left = min(deadline, time.monotonic() + 20) - time.monotonic()
        check(left > 0 and sel.select(timeout=left), "the daemon printed no ready line")
        byte = os.read(proc.stdout.fileno(), 1)  # unbuffered: select sees the rest
        check(byte, "the daemon closed stdout before its ready line")
        line += byte
    text = line.decode().strip()
    print(text)
    check(text.startswith("plumbline ready "), "unexpected ready line: " + text)
    return dict(f.split("=", 1) for f in text.split()[2:])


def port_of(host_port):
    return int(host_port.rsplit(":", 1)[1])


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


# --- Prometheus's HTTP API ---------------------------------------------------

def http_get(url, timeout=5):
    with urllib.request.urlopen(url, timeout=timeout) as r:
        return r.status, r.read().decode()


def api(port, path, **params):
    url = "http://127.0.0.1:%d/api/v1/%s" % (port, path)
    if params:
        url += "?" + urllib.parse.urlencode(params)
    status, body = http_get(url)
    doc = json.loads(body)
    check(status == 200 and doc.get("status") == "success", "%s: %s" % (url, body[:500]))
    return doc["data"]


def query(port, promql):
    return api(port, "query", query=promql)["result"]


def wait_for(what, pred, deadline, interval=0.5):
    while time.monotonic() < deadline:
        try:
            value = pred()
        except (urllib.error.URLError, ConnectionError, OSError):
            value = None
        if value:
            return value
        time.sleep(interval)
    raise Failure("timed out waiting for " + what)


def alarm_alerts(port):
    return [a for a in api(port, "alerts")["alerts"]
            if a["labels"].get("alertname") == "PlumblineAlarm"]


# --- The test ----------------------------------------------------------------

def write_prometheus_files(tmp, scrape_config, rules, http_port):
    with open(rules) as f:
        doc = yaml.safe_load(f)
    shortened = 0
    for group in doc["groups"]:
        for rule in group["rules"]:
            if "for" in rule:
                rule["for"] = FOR_HOLD
                shortened += 1
    check(shortened > 0, "the rules have no for: hold to shorten")
    rules_copy = os.path.join(tmp, "plumbline_rules.yml")
    with open(rules_copy, "w") as f:
        yaml.safe_dump(doc, f, sort_keys=False, width=1000)

    with open(scrape_config) as f:
        cfg = yaml.safe_load(f)
    cfg["global"]["scrape_interval"] = "1s"
    cfg["global"]["evaluation_interval"] = "1s"
    cfg["rule_files"] = [rules_copy]
    jobs = [j for j in cfg["scrape_configs"] if j["job_name"] == "plumbline"]
    check(len(jobs) == 1, "the scrape config has no single plumbline job")
    jobs[0]["static_configs"] = [{"targets": ["127.0.0.1:%d" % http_port]}]
    cfg["scrape_configs"] = jobs
    path = os.path.join(tmp, "prometheus.yml")
    with open(path, "w") as f:
        yaml.safe_dump(cfg, f, sort_keys=False)
    return path


def start_prometheus(tmp, config, deadline):
    """Starts prometheus on a free loopback port; retries when the port was taken."""
    for attempt in range(3):
        port = free_port()
        p = Process("prometheus", [
            "prometheus", "--config.file=" + config,
            "--storage.tsdb.path=" + os.path.join(tmp, "tsdb-%d" % attempt),
            "--web.listen-address=127.0.0.1:%d" % port, "--log.level=warn",
        ], os.path.join(tmp, "prometheus-%d.log" % attempt))

        def ready():
            check(p.proc.poll() is None, "prometheus exited: " + p.log_text()[-2000:])
            return http_get("http://127.0.0.1:%d/-/ready" % port)[0] == 200

        try:
            wait_for("prometheus to be ready", ready, min(deadline, time.monotonic() + 60))
            return p, port
        except Failure as e:
            p.stop()
            if "address already in use" not in p.log_text():
                raise
            print("port %d was taken; trying another (%s)" % (port, e))
    raise Failure("prometheus did not start")


def run_test(a, tmp, deadline, procs):
    cfg = os.path.join(tmp, "plumbline.toml")
    with open(cfg, "w") as f:
        f.write(DAEMON_CONFIG)
    daemon = Process("plumbline serve", [a.plumbline, "serve", "--config", cfg, "--ingest",
                                         "127.0.0.1:0", "--http", "127.0.0.1:0"],
                     os.path.join(tmp, "plumbline.log"), stdout=subprocess.PIPE)
    procs.append(daemon)
    ready = read_ready_line(daemon.proc, deadline)
    tcp_port, http_port = port_of(ready["ingest_tcp"]), port_of(ready["http"])

    prom_cfg = write_prometheus_files(tmp, a.scrape_config, a.rules, http_port)
    prom, prom_port = start_prometheus(tmp, prom_cfg, deadline)
    procs.append(prom)

    # Prometheus scrapes the daemon before any data arrive.
    wait_for("up{job=\"plumbline\"} == 1",
             lambda: any(r["value"][1] == "1" for r in query(prom_port, 'up{job="plumbline"}')),
             deadline)
    print("Prometheus scrapes the daemon (up == 1)")

    truth_path = os.path.join(tmp, "truth.json")
    sim = Process("plumbline-sim send", [
        a.plumbline_sim, "send", "--scenario", a.scenario, "--to", "127.0.0.1:%d" % tcp_port,
        "--speed", "%g" % a.speed, "--truth", truth_path, "--quiet",
    ], os.path.join(tmp, "plumbline-sim.log"))
    procs.append(sim)
    try:
        code = sim.proc.wait(timeout=max(1, deadline - time.monotonic()))
    except subprocess.TimeoutExpired:
        raise Failure("plumbline-sim send did not finish before the deadline")
    check(code == 0, "plumbline-sim send exited %s: %s" % (code, sim.log_text()[-2000:]))
    with open(truth_path) as f:
        truth = json.load(f)
    check(sorted(s["stream"] for s in truth["streams"]) == STREAMS,
          "the scenario's streams are %s" % [s["stream"] for s in truth["streams"]])
    check([x["stream"] for x in truth["faults"]] == [FAULTED],
          "the scenario's faults are on %s" % [x["stream"] for x in truth["faults"]])
    shift = truth["faults"][0]["size"]
    print("sent %d streams with plumbline-sim; %s shifted by %+.2f g from %.1f s" %
          (len(truth["streams"]), FAULTED, shift, truth["faults"][0]["start_offset"]))

    wrong = []  # PlumblineAlarm alerts ever seen for a head other than the faulted one

    def firing():
        alerts = alarm_alerts(prom_port)
        wrong.extend(x for x in alerts if x["labels"].get("stream") != FAULTED)
        check(not wrong, "PlumblineAlarm for an in-control stream: %s" % wrong[:1])
        return [x for x in alerts
                if x["labels"].get("stream") == FAULTED and x["state"] == "firing"]

    alert = wait_for("PlumblineAlarm to fire for " + FAULTED, firing, deadline)[0]
    print("PlumblineAlarm firing: labels %s" % alert["labels"])
    print("  drift annotation: %s" % alert["annotations"].get("drift"))
    check(alert["labels"].get("severity") == "warning", "alert severity is not warning")
    check(alert["labels"].get("job") == "plumbline", "alert without job=plumbline")
    check(CAUTION in alert["annotations"].get("description", ""),
          "the firing alert's description lacks the caution")
    check(alert["annotations"].get("drift", "").startswith("mean-diff estimate "),
          "the drift annotation was not rendered from the drift series: %r" %
          alert["annotations"].get("drift"))

    # The other heads stay inactive over several more rule evaluations.
    until = time.monotonic() + 5
    while time.monotonic() < until:
        firing()
        time.sleep(0.5)
    groups = api(prom_port, "rules", type="alert")["groups"]
    rules = {r["name"]: r for g in groups for r in g["rules"]}
    check("PlumblineAlarm" in rules, "Prometheus has not loaded the PlumblineAlarm rule")
    for name, r in rules.items():
        check(r["health"] == "ok", "rule %s: health %s, %s" % (name, r["health"],
                                                                r.get("lastError")))
    streams_alerted = sorted(x["labels"].get("stream") for x in rules["PlumblineAlarm"]["alerts"])
    check(streams_alerted == [FAULTED], "PlumblineAlarm is active for %s" % streams_alerted)
    print("rule PlumblineAlarm: state %s, active only for %s" % (rules["PlumblineAlarm"]["state"],
                                                                 streams_alerted))

    # The daemon's alarm as Prometheus stored it: 1 for the faulted head, 0
    # for each of the others (so they were scraped, and are inactive).
    alarms = {r["metric"]["stream"]: r["value"][1] for r in query(prom_port, "plumbline_alarm")}
    print("plumbline_alarm: %s" % alarms)
    check(alarms == {s: ("1" if s == FAULTED else "0") for s in STREAMS},
          "plumbline_alarm in Prometheus is %s" % alarms)

    # The drift band, stored as series for the faulted head.
    sel = '{job="plumbline",stream="%s"}' % FAULTED
    band = {}
    for name in ("plumbline_drift_lower", "plumbline_drift_estimate", "plumbline_drift_upper"):
        series = api(prom_port, "series", **{"match[]": name + sel})
        check(len(series) == 1 and series[0].get("quantity") == "mean-diff",
              "stored series of %s%s: %s" % (name, sel, series))
        now = time.time()
        points = api(prom_port, "query_range", query=name + sel, start="%.3f" % (now - 30),
                     end="%.3f" % now, step="1")["result"]
        check(len(points) == 1 and len(points[0]["values"]) >= 2,
              "%s%s has fewer than 2 stored points in the last 30 s" % (name, sel))
        band[name] = float(points[0]["values"][-1][1])
    print("drift band of %s: [%.4f, %.4f], estimate %.4f g" %
          (FAULTED, band["plumbline_drift_lower"], band["plumbline_drift_upper"],
           band["plumbline_drift_estimate"]))
    check(0 < band["plumbline_drift_lower"] <= band["plumbline_drift_estimate"]
          <= band["plumbline_drift_upper"],
          "the band of the shifted head is not an interval above 0: %s" % band)

    # The simulator's own score of the daemon's alarm history agrees.
    out = subprocess.run([a.plumbline_sim, "score", "--truth", truth_path, "--daemon",
                          "127.0.0.1:%d" % http_port, "--json"], stdin=subprocess.DEVNULL,
                         capture_output=True, text=True, timeout=30)
    check(out.returncode == 0, "plumbline-sim score exited %d: %s" % (out.returncode, out.stderr))
    score = json.loads(out.stdout)
    print("plumbline-sim score: %s, %d false alarms" %
          ([(x["stream"], x["result"], x.get("delay_seconds")) for x in score["faults"]],
           score["false_alarms"]))
    check([(x["stream"], x["result"]) for x in score["faults"]] == [(FAULTED, "detected")],
          "plumbline-sim score: %s" % score["faults"])
    check(score["false_alarms"] == 0, "plumbline-sim score counts %d false alarms" %
          score["false_alarms"])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--plumbline", required=True)
    ap.add_argument("--plumbline-sim", required=True)
    ap.add_argument("--scenario", required=True)
    ap.add_argument("--speed", type=float, default=4,
                    help="simulated seconds per wall second of plumbline-sim send")
    ap.add_argument("--rules", required=True)
    ap.add_argument("--scrape-config", required=True)
    ap.add_argument("--deadline", type=float, default=240,
                    help="seconds the whole run may take")
    a = ap.parse_args()
    deadline = time.monotonic() + a.deadline
    tmp = tempfile.mkdtemp(prefix="plumbline-e2e-")
    procs = []
    failure = None
    try:
        run_test(a, tmp, deadline, procs)
    except Failure as e:
        failure = str(e)
    finally:
        codes = {}
        for p in reversed(procs):
            codes[p.name] = p.stop()
        if failure or any(c != 0 for c in codes.values()):
            for p in procs:
                print("---- %s log (%s) ----" % (p.name, p.log_path))
                print(p.log_text()[-4000:])
        shutil.rmtree(tmp, ignore_errors=True)
    if failure is None and codes.get("plumbline serve") != 0:
        failure = "the daemon did not exit 0 on SIGTERM (exit %s)" % codes.get("plumbline serve")
    if failure is None and codes.get("prometheus", 0) is None:
        failure = "prometheus did not stop on SIGTERM and was killed"
    if failure:
        print("FAIL:", failure)
        return 1
    print("PASS")
    return 0


if __name__ == "__main__":
    sys.exit(main())
