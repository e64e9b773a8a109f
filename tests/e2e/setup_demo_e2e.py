#!/usr/bin/python3
"""setup_demo_e2e.py: the README's first command, `bash deploy/setup.sh demo`,
run fast and bounded.

    setup_demo_e2e.py --setup deploy/setup.sh --build-dir BUILD
                      --mode interrupt|bounded [--speed X] [--deadline SECONDS]

`setup.sh demo` is `setup.sh build` followed by `setup.sh demo-run`; this
test runs `demo-run` on the test's own build (PLUMBLINE_BUILD_DIR), so
nothing is built or installed here, with PLUMBLINE_DEMO_SPEED=--speed. The
demo plays simulator/scenarios/bottling_demo.toml (the invented Wrenfield
Springs bottling plant): six streams, a 1.0 mL step on line 1's filler from
150 s to 420 s.

  --mode interrupt  waits for the demo to announce the alarm, then sends
                    SIGINT to the script's process group, as Ctrl-C in a
                    terminal does;
  --mode bounded    sets PLUMBLINE_DEMO_SECONDS so that the demo stops
                    itself at about 400 simulated seconds, before the
                    fault ends.

Either way the output must announce the alarm on the faulted stream and on
no other, report both processes stopped and the daemon's exit 0, and hold
the score table with the fault detected and no false alarm; the script must
exit 0, and neither the daemon nor the simulator may be left running. The
script runs in a session of its own; on the deadline it, and the two PIDs it
printed, are killed and the test fails.
"""
import argparse
import os
import re
import selectors
import signal
import subprocess
import sys
import time

# The scenario's streams (simulator/scenarios/bottling_demo.toml) and its
# one faulted stream.
FAULTED = "wrenfield.line1.filler.fill_volume"
STREAMS = ["wrenfield.%s.%s" % (line, s) for line in ("line1", "line2")
           for s in ("filler.fill_volume", "capper.cap_torque", "labeller.label_offset")]


class Failure(Exception):
    pass


def check(cond, message):
    if not cond:
        raise Failure(message)


def running(pid):
    """True while PID exists and is not a zombie."""
    try:
        with open("/proc/%d/stat" % pid) as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--setup", required=True)
    ap.add_argument("--build-dir", required=True)
    ap.add_argument("--mode", choices=("interrupt", "bounded"), required=True)
    ap.add_argument("--speed", type=int, default=20)
    ap.add_argument("--deadline", type=float, default=150)
    a = ap.parse_args()
    deadline = time.monotonic() + a.deadline

    env = dict(os.environ, PLUMBLINE_BUILD_DIR=os.path.abspath(a.build_dir),
               PLUMBLINE_DEMO_SPEED=str(a.speed))
    env.pop("PLUMBLINE_DEMO_SECONDS", None)
    if a.mode == "bounded":
        env["PLUMBLINE_DEMO_SECONDS"] = str(400 // a.speed)
    proc = subprocess.Popen(["bash", a.setup, "demo-run"], stdin=subprocess.DEVNULL,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, env=env,
                            start_new_session=True)
    print("started bash %s demo-run, pid %d (%s)" % (a.setup, proc.pid, a.mode))
    sel = selectors.DefaultSelector()
    sel.register(proc.stdout, selectors.EVENT_READ)
    out, pids, interrupted, failure = "", {}, False, None
    buf = b""
    try:
        while True:
            left = deadline - time.monotonic()
            check(left > 0, "the demo did not finish within the deadline")
            if not sel.select(timeout=min(left, 1)):
                continue
            chunk = os.read(proc.stdout.fileno(), 65536)
            if not chunk:
                break
            buf += chunk
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                text = line.decode(errors="replace")
                print(text)
                out += text + "\n"
                m = re.search(r"started (plumbline serve|plumbline-sim send) \(pid (\d+)\)", text)
                if m:
                    pids[m.group(1)] = int(m.group(2))
                if a.mode == "interrupt" and not interrupted and "ALARM raised on " in text:
                    time.sleep(1)
                    os.killpg(proc.pid, signal.SIGINT)  # as Ctrl-C in a terminal
                    interrupted = True
                    print("(sent SIGINT to the process group %d)" % proc.pid)
        code = proc.wait(timeout=max(1, deadline - time.monotonic()))
        check(code == 0, "setup.sh demo-run exited %d" % code)
        check(set(pids) == {"plumbline serve", "plumbline-sim send"},
              "the demo did not print both PIDs: %s" % pids)
        raised = re.findall(r"ALARM raised on (\S+?),", out)
        check(raised == [FAULTED], "alarms announced on %s, not on %s alone" % (raised, FAULTED))
        check(all(s in STREAMS for s in raised), "an alarm on an unknown stream: %s" % raised)
        if a.mode == "interrupt":
            check(interrupted, "no alarm was announced, so no SIGINT was sent")
            check("demo: stopping (interrupted)" in out, "the demo did not stop on SIGINT")
        else:
            check("demo: stopping (PLUMBLINE_DEMO_SECONDS=" in out,
                  "the demo did not stop at PLUMBLINE_DEMO_SECONDS")
        check(re.search(r"plumbline serve \(pid \d+\) stopped, exit 0\n", out),
              "the daemon was not reported stopped with exit 0")
        check(re.search(r"plumbline-sim send \(pid \d+\) stopped, exit \d+ ", out),
              "the simulator was not reported stopped")
        check(re.search(r"^\s*%s\s+step\s+150\.0\s+420\.0\s+detected\s" % re.escape(FAULTED),
                        out, re.M), "the score does not show the fault on %s detected" % FAULTED)
        check(re.search(r"^\s*false alarms: 0 in ", out, re.M),
              "the score shows false alarms")
        check("demo: alarms raised on: %s\n" % FAULTED in out,
              "the closing line does not name %s alone" % FAULTED)
    except Failure as e:
        failure = str(e)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        time.sleep(0.2)
        left = [name for name, pid in pids.items() if running(pid)]
        for name in left:
            os.kill(pids[name], signal.SIGKILL)
        if left and failure is None:
            failure = "still running after the demo: %s" % left
    if failure:
        print("FAIL:", failure)
        return 1
    print("PASS: alarm on %s alone; both processes stopped (%s)" % (FAULTED, pids))
    return 0


if __name__ == "__main__":
    sys.exit(main())
