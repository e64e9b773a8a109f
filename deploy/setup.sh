#!/usr/bin/env bash
# deploy/setup.sh: install, build, test and demonstrate plumbline on Debian 12.
#
# Usage: bash deploy/setup.sh deps|build|demo|demo-run|demo-compare|test|sanitize|tsan|fuzz|install
#
#   deps      install the Debian packages the build and the tests need
#             (skipped when all of them are installed already)
#   build     deps, then a RelWithDebInfo build in build/
#   demo      build, then demo-run
#   demo-run  the live demo on an existing build, nothing built or installed:
#             `plumbline serve` (config/bottling_demo.toml, loopback ports 7301/7302
#             or free ones) and `plumbline-sim send` with
#             simulator/scenarios/bottling_demo.toml in real time; a status
#             line every 15 simulated seconds, the alarm when it is raised,
#             and a score at the end or on Ctrl-C. Environment:
#             PLUMBLINE_BUILD_DIR (default build), PLUMBLINE_DEMO_SPEED
#             (simulated seconds per wall second, default 1) and
#             PLUMBLINE_DEMO_SECONDS (stop after this many wall seconds)
#   demo-compare  build, then compare the demo data in simulator/examples/,
#             then run `plumbline serve` briefly and feed it the same data live
#   test      build, then run every test suite with ctest (unit, reference,
#             calibration, cli, integration, deploy and e2e)
#   sanitize  deps, then an AddressSanitizer + UndefinedBehaviorSanitizer
#             build in build-asan/ and the unit suite under it
#   tsan      deps, then a ThreadSanitizer build in build-tsan/ and the
#             daemon's tests under it (the integration suite, which runs the
#             instrumented `plumbline serve`, and the daemon's unit cases)
#   install   build for the install prefix $PLUMBLINE_PREFIX (default
#             /usr/local), then `cmake --install build`: the binary, the
#             configuration (kept if present), the systemd unit and the
#             Prometheus files; then `systemctl daemon-reload` when systemd
#             runs. Starts nothing: it prints the command that does.
#   fuzz      deps, then both libFuzzer targets (tests/fuzz/) built with
#             clang-14 in build-fuzz/, each run for a bounded time: the
#             snapshot loader for FUZZ_SNAPSHOT_SECONDS (default 60), the
#             wire format for FUZZ_WIRE_SECONDS (default 30)
#
# Runs as root on a fresh Debian 12 machine, asks nothing, and can be run
# again at any time: each step only does what is still missing. Works from
# any current directory.
set -euo pipefail

repo_root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$repo_root"

packages=(
  build-essential cmake g++
  libboost-dev libeigen3-dev prometheus-cpp-dev libtomlplusplus-dev catch2
  libssl-dev libcli11-dev nlohmann-json3-dev
  python3-scipy python3-numpy python3-yaml
  prometheus systemd
  clang-14 libclang-rt-14-dev
)

examples=simulator/examples

say() { printf '==> %s\n' "$*"; }

# Prints a command, then runs it.
run() {
  printf '+ %s\n' "$*"
  "$@"
}

usage() {
  cat >&2 <<'EOF'
usage: bash deploy/setup.sh COMMAND

commands:
  deps      install the Debian 12 packages plumbline needs (quick when present)
  build     deps, then build in build/ (RelWithDebInfo)
  demo      build, then demo-run
  demo-run  the live demo on the build in $PLUMBLINE_BUILD_DIR (default build/):
            plumbline serve and plumbline-sim send with the bottling scenario, in
            real time (PLUMBLINE_DEMO_SPEED=X for X times faster,
            PLUMBLINE_DEMO_SECONDS=S to stop after S seconds); Ctrl-C stops it
  demo-compare  build, then run `plumbline compare` on the demo data, then the daemon live
  test      build, then run all test suites (ctest)
  sanitize  deps, then build in build-asan/ with ASan + UBSan and run the unit suite
  tsan      deps, then build in build-tsan/ with ThreadSanitizer and run the daemon's tests
  install   build, then install under $PLUMBLINE_PREFIX (default /usr/local) with the
            systemd unit; see README.md, "Running under systemd"
  fuzz      deps, then build the libFuzzer targets in build-fuzz/ and run each for a bounded time
EOF
}

ncpu() { nproc 2>/dev/null || echo 2; }

# The packages of $packages that dpkg does not list as installed.
missing_packages() {
  local p status
  for p in "${packages[@]}"; do
    status="$(dpkg-query -W -f='${db:Status-Abbrev}' "$p" 2>/dev/null || true)"
    if [[ "$status" != ii* ]]; then
      printf '%s\n' "$p"
    fi
  done
}

# True when apt's package lists exist and were refreshed in the last day.
apt_lists_fresh() {
  [[ -n "$(find /var/lib/apt/lists -maxdepth 1 -name '*_Packages*' -mmin -1440 -print -quit \
    2>/dev/null)" ]]
}

apt_update() {
  local attempt
  for attempt in 1 2 3; do
    if run apt-get update -o DPkg::Lock::Timeout=600; then
      return 0
    fi
    say "apt-get update failed (attempt $attempt of 3); retrying in 10 s"
    sleep 10
  done
  return 1
}

apt_install() {
  run env DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends \
    -o DPkg::Lock::Timeout=600 "$@"
}

cmd_deps() {
  if ! command -v dpkg-query >/dev/null 2>&1; then
    echo "setup.sh: dpkg-query not found; this script is for Debian 12" >&2
    exit 1
  fi
  local missing
  mapfile -t missing < <(missing_packages)
  if ((${#missing[@]} == 0)); then
    say "deps: all ${#packages[@]} packages are installed; skipping apt"
    return 0
  fi
  say "deps: missing packages: ${missing[*]}"
  if ((EUID != 0)); then
    echo "setup.sh: installing packages needs root; run this as root" >&2
    exit 1
  fi
  if apt_lists_fresh; then
    say "deps: apt package lists are less than a day old; not updating them"
  else
    say "deps: apt package lists are missing or older than a day; updating"
    apt_update
  fi
  # Install the whole list: apt leaves installed packages alone, and this
  # keeps the installed set the same whatever was present before.
  if ! apt_install "${packages[@]}"; then
    say "deps: install failed; refreshing the package lists and trying once more"
    apt_update
    apt_install "${packages[@]}"
  fi
  mapfile -t missing < <(missing_packages)
  if ((${#missing[@]} != 0)); then
    echo "setup.sh: still not installed after apt-get: ${missing[*]}" >&2
    exit 1
  fi
  say "deps: done"
}

cmd_build() {
  cmd_deps
  say "build: configuring build/ (RelWithDebInfo)"
  run cmake -S . -B build -DCMAKE_BUILD_TYPE=RelWithDebInfo
  say "build: compiling with $(ncpu) jobs"
  run cmake --build build -j"$(ncpu)"
  say "build: done; the binary is build/daemon/plumbline"
}

# `demo-compare`: build, then `plumbline compare` on the demo data in
# simulator/examples/, then a short live run of the daemon on the same data.
cmd_demo_compare() {
  cmd_build
  local bin=./build/daemon/plumbline
  echo
  say "demo: Larkspur Dairy (an invented plant; the data is invented for demos)."
  say "demo: Cup line B, filler head 4, fill weight in grams. Reference: 400 fills"
  say "demo: from an in-control shift. Recent: 150 fills after the nozzle was reseated."
  echo
  say "Is the recent fill-weight distribution the same as the reference one?" \
    "Anderson-Darling permutation test; a small p-value says it has changed."
  run "$bin" compare --reference "$examples/fill_weight_reference.csv" \
    --recent "$examples/fill_weight_recent.csv" --test ad
  echo
  say "How far has the fill weight moved, in grams? A 95 % BCa bootstrap interval for" \
    "the difference of means, to hold against the line's tolerance."
  run "$bin" compare --reference "$examples/fill_weight_reference.csv" \
    --recent "$examples/fill_weight_recent.csv" --interval mean-diff
  echo
  say "Test and interval together as JSON, the form a script or dashboard would read."
  run "$bin" compare --reference "$examples/fill_weight_reference.csv" \
    --recent "$examples/fill_weight_recent.csv" --test ad --interval mean-diff --json
  echo
  say "Bottle line D, capper station 3: cap torque (N m) and label offset (mm) together." \
    "Energy-distance permutation test: has the joint distribution moved since the label reel change?"
  run "$bin" compare --reference "$examples/capper_reference.csv" \
    --recent "$examples/capper_recent.csv" --test energy
  echo
  demo_live "$bin"
  echo
  say "demo: done. Results are advisory: they do not replace site quality procedures."
}

# The numbers of a demo CSV file (comment and header lines left out).
csv_values() { grep -E '^[+-]?[0-9.]' "$1"; }

# One HTTP GET over bash's /dev/tcp (no curl needed); prints the body.
http_get() {
  local port="$1" target="$2"
  exec 4<>"/dev/tcp/127.0.0.1/$port"
  printf 'GET %s HTTP/1.1\r\nHost: 127.0.0.1\r\nConnection: close\r\n\r\n' "$target" >&4
  sed '1,/^\r$/d' <&4
  exec 4<&-
}

# The daemon, live: start `plumbline serve` with config/demo.toml on free
# loopback ports, feed it two filler heads' fill weights at a steady pace,
# show what it concluded, and stop it with SIGTERM.
demo_live() {
  local bin="$1" dir pid ready tcp http
  dir="$(mktemp -d)"
  say "Live: plumbline serve with config/demo.toml, on free loopback ports."
  "$bin" serve --config config/demo.toml --ingest 127.0.0.1:0 --http 127.0.0.1:0 \
    >"$dir/ready" 2>"$dir/log" &
  pid=$!
  # Stop the daemon whatever happens from here on.
  trap 'kill "$pid" 2>/dev/null || true; rm -rf "$dir"' EXIT
  for _ in $(seq 100); do
    ready="$(head -n1 "$dir/ready" 2>/dev/null || true)"
    [[ -n "$ready" ]] && break
    sleep 0.1
  done
  if [[ "$ready" != "plumbline ready "* ]]; then
    echo "setup.sh: the daemon did not start; its log:" >&2
    cat "$dir/log" >&2
    exit 1
  fi
  say "$ready"
  tcp="$(sed -E 's/.*ingest_tcp=[^ ]*:([0-9]+).*/\1/' <<<"$ready")"
  http="$(sed -E 's/.*http=[^ ]*:([0-9]+).*/\1/' <<<"$ready")"
  say "Feeding two filler heads of cup line B, 25 fills per head every 0.2 s:"
  say "  head 4: 400 in-control fills (its baseline), then the 150 after the nozzle was reseated"
  say "  head 3: 400 in-control fills, then 150 more from the same in-control shift"
  local -a head4 head3
  mapfile -t head4 < <(csv_values "$examples/fill_weight_reference.csv"; csv_values "$examples/fill_weight_recent.csv")
  mapfile -t head3 < <(csv_values "$examples/fill_weight_reference.csv"; csv_values "$examples/fill_weight_reference.csv" | head -n 150)
  exec 3<>"/dev/tcp/127.0.0.1/$tcp"
  local i j
  for ((i = 0; i < ${#head4[@]}; i += 25)); do
    for ((j = i; j < i + 25 && j < ${#head4[@]}; j++)); do
      printf 'larkspur/line_b/fill_4,,%s\nlarkspur/line_b/fill_3,,%s\n' "${head4[j]}" "${head3[j]}" >&3
    done
    sleep 0.2
  done
  exec 3>&-
  sleep 1
  echo
  say "What the daemon says (GET /api/streams/...), one line per filler head:"
  local s
  for s in larkspur/line_b/fill_4 larkspur/line_b/fill_3; do
    http_get "$http" "/api/streams/$s" | /usr/bin/python3 -c '
import json, sys
j = json.load(sys.stdin)
r = j.get("last_result") or {}
t = (r.get("tests") or [{}])[0]
i = r.get("interval") or {}
print("  %-24s alarm %-5s  evaluations %-3d  %s p = %.4g  drift %s %+.3f g [%+.3f, %+.3f]" % (
    j["name"], "ON" if j["alarm"]["active"] else "off", j["evaluations"], t.get("name", "-"),
    t.get("p_value", float("nan")), i.get("quantity", "-"), i.get("estimate", float("nan")),
    i.get("lower", float("nan")), i.get("upper", float("nan"))))'
  done
  echo
  say "The same in Prometheus form (GET /metrics), alarm and drift band:"
  http_get "$http" /metrics | grep -E '^plumbline_(alarm|drift_(lower|estimate|upper))\{' || true
  echo
  say "The daemon's log (stderr):"
  sed 's/^/  /' "$dir/log"
  kill -TERM "$pid"
  wait "$pid" || true
  trap - EXIT
  rm -rf "$dir"
  say "Stopped the daemon (SIGTERM). Run it yourself: $bin serve --config config/demo.toml"
}

# ---- The live demo: `plumbline serve` and `plumbline-sim send` together ----

demo_scenario=simulator/scenarios/bottling_demo.toml
demo_config=config/bottling_demo.toml

# `demo`: build, then the live demo.
cmd_demo() {
  cmd_build
  echo
  cmd_demo_run
}

# The first [[fault]]'s sensor (the faulted stream) and start of a scenario.
scenario_fault_stream() { sed -n 's/^sensor = "\([^"]*\)".*/\1/p' "$1" | head -n 1; }
scenario_fault_start() {
  awk '/^\[\[fault\]\]/ { f = 1 } f && /^start_seconds = / { print $3; exit }' "$1"
}

# Prints a whole number of seconds as "M min S s".
min_sec() { printf '%d min %02d s' $(($1 / 60)) $(($1 % 60)); }

# The stream list from the daemon's API, digested by /usr/bin/python3 (the
# JSON parser at hand): one line per stream, "NAME ON|off P_VALUE". Prints
# nothing when the daemon does not answer.
api_streams_digest() {
  local http="$1"
  (http_get "$http" "/api/streams?limit=1000") 2>/dev/null | /usr/bin/python3 -c '
import json, sys
try:
    j = json.load(sys.stdin)
except ValueError:
    sys.exit(0)
for s in j["streams"]:
    print(s["name"], "ON" if s["alarm"] else "off", s.get("p_value", "-"))' 2>/dev/null || true
}

# One stream's last p-value and drift band, and its newest raised alarm
# event, from the daemon's API, on one line: "P LOWER ESTIMATE UPPER
# QUANTITY RAISED_TIME RAISED_P RAISED_LOWER RAISED_ESTIMATE RAISED_UPPER"
# ("-" where there is none). Prints nothing when the daemon does not answer.
api_stream_digest() {
  local http="$1" stream="$2"
  (http_get "$http" "/api/streams/$stream") 2>/dev/null | /usr/bin/python3 -c '
import json, sys
try:
    j = json.load(sys.stdin)
except ValueError:
    sys.exit(0)
r = j.get("last_result") or {}
t = (r.get("tests") or [{}])[0]
i = r.get("interval") or {}
raised = [e for e in j["alarm"]["history"] if e["kind"] == "raised"]
e = raised[-1] if raised else {}
f = lambda v: "-" if v is None else "%.4g" % v
print(f(t.get("p_value")), f(i.get("lower")), f(i.get("estimate")), f(i.get("upper")),
      i.get("quantity", "-"), e.get("time", "-"), f(e.get("p_value")), f(e.get("lower")),
      f(e.get("estimate")), f(e.get("upper")))' 2>/dev/null || true
}

# True while PID runs (and is not a zombie of ours).
alive() { kill -0 "$1" 2>/dev/null; }

# Sends SIGTERM to PID, a child of this shell, waits for it (at most 15 s,
# then SIGKILL) and sets stopped_code to its exit code. (Not in a $(...)
# subshell: only this shell can wait for its children.)
stop_pid() {
  local pid="$1" i
  stopped_code=0
  if alive "$pid"; then kill -TERM "$pid" 2>/dev/null || true; fi
  for ((i = 0; i < 150; i++)); do
    alive "$pid" || break
    # A stopped child shows as a zombie until it is waited for.
    [[ "$(cut -d' ' -f3 "/proc/$pid/stat" 2>/dev/null)" == Z ]] && break
    sleep 0.1
  done
  if alive "$pid" && [[ "$(cut -d' ' -f3 "/proc/$pid/stat" 2>/dev/null)" != Z ]]; then
    kill -KILL "$pid" 2>/dev/null || true
  fi
  wait "$pid" 2>/dev/null || stopped_code=$?
}

# Starts `plumbline serve` with $demo_config at INGEST and HTTP in its
# own session (so that a Ctrl-C reaches this script alone, which then stops
# it in order), and waits for its ready line. Sets daemon_pid and ready;
# returns 1 when the daemon exited without one.
start_daemon() {
  local bin="$1" dir="$2" ingest="$3" http="$4" i
  ready=""
  setsid "$bin" serve --config "$demo_config" --ingest "$ingest" --http "$http" >"$dir/ready" 2>"$dir/daemon.log" &
  daemon_pid=$!
  for ((i = 0; i < 200; i++)); do
    ready="$(head -n1 "$dir/ready" 2>/dev/null || true)"
    [[ -n "$ready" ]] && return 0
    alive "$daemon_pid" || break
    sleep 0.1
  done
  wait "$daemon_pid" 2>/dev/null || true
  return 1
}

# `demo-run`: the live demo on an existing build ($PLUMBLINE_BUILD_DIR,
# default build/), without building or installing anything.
#
#   PLUMBLINE_DEMO_SPEED    simulated seconds per wall second (default 1:
#                           real time, 10 minutes)
#   PLUMBLINE_DEMO_SECONDS  stop after this many wall seconds, as on Ctrl-C
#                           (default: when the scenario has been sent)
cmd_demo_run() {
  local build="${PLUMBLINE_BUILD_DIR:-build}"
  local speed="${PLUMBLINE_DEMO_SPEED:-1}" limit="${PLUMBLINE_DEMO_SECONDS:-0}"
  local bin="$build/daemon/plumbline" sim="$build/simulator/plumbline-sim"
  local f
  for f in "$bin" "$sim"; do
    if [[ ! -x "$f" ]]; then
      echo "setup.sh: $f is missing; run 'bash deploy/setup.sh build' first" \
        "(or set PLUMBLINE_BUILD_DIR to a build directory)" >&2
      exit 1
    fi
  done
  if ! [[ "$speed" =~ ^[0-9]+$ ]] || ((speed < 1 || speed > 1000)); then
    echo "setup.sh: PLUMBLINE_DEMO_SPEED must be a whole number from 1 to 1000, got '$speed'" >&2
    exit 2
  fi
  if ! [[ "$limit" =~ ^[0-9]+$ ]]; then
    echo "setup.sh: PLUMBLINE_DEMO_SECONDS must be a whole number of seconds, got '$limit'" >&2
    exit 2
  fi
  local faulted fault_start
  faulted="$(scenario_fault_stream "$demo_scenario")"
  fault_start="$(scenario_fault_start "$demo_scenario")"
  fault_start="${fault_start%%.*}"

  local dir
  dir="$(mktemp -d)"
  daemon_pid="" sim_pid=""
  # Whatever happens, nothing this demo started outlives it.
  trap 'for p in $sim_pid $daemon_pid; do kill -TERM "$p" 2>/dev/null || true; done; rm -rf "$dir"' EXIT
  # Ctrl-C (or SIGTERM) asks the loop below to stop both processes in order
  # and print the summary.
  local stop=0 reason=""
  trap 'stop=1' INT TERM

  say "demo: Wrenfield Springs, an invented bottling plant (the data is invented, for demos)."
  say "demo: two lines, each with a filler (fill volume, mL), a capper (cap torque, N m) and a"
  say "demo: labeller (label offset, mm), every sensor 5 times a second: 6 streams."
  say "demo: starting plumbline serve with $demo_config (the built-in defaults, and a"
  say "demo: practical tolerance per station: 0.3 mL, 0.05 N m, 0.2 mm)"
  if ! start_daemon "$bin" "$dir" 127.0.0.1:7301 127.0.0.1:7302; then
    say "demo: ports 7301/7302 are not free; using free loopback ports instead"
    if ! start_daemon "$bin" "$dir" 127.0.0.1:0 127.0.0.1:0; then
      echo "setup.sh: the daemon did not start; its log:" >&2
      cat "$dir/daemon.log" >&2
      exit 1
    fi
  fi
  local tcp http
  tcp="$(sed -E 's/.*ingest_tcp=[^ ]*:([0-9]+).*/\1/' <<<"$ready")"
  http="$(sed -E 's/.*http=[^ ]*:([0-9]+).*/\1/' <<<"$ready")"
  say "demo: started plumbline serve (pid $daemon_pid): $ready"

  setsid "$sim" send --scenario "$demo_scenario" --to "127.0.0.1:$tcp" --speed "$speed" \
    --truth "$dir/truth.json" 2>"$dir/sim.log" &
  sim_pid=$!
  local started=$SECONDS started_epoch
  started_epoch="$(date +%s)"
  say "demo: started plumbline-sim send (pid $sim_pid): $demo_scenario at speed $speed" \
    "(simulated seconds per wall second)"
  echo
  say "Where to look:"
  say "  metrics (Prometheus text):  http://127.0.0.1:$http/metrics"
  say "  the faulted stream:         http://127.0.0.1:$http/api/streams/$faulted"
  say "  all streams:                http://127.0.0.1:$http/api/streams"
  local in_s=$((180 / speed))
  say "What to expect: the reference windows are full after 100 s, the first evaluations run"
  say "  at 120 s, and at ${fault_start} s the filler of line 1 starts over-filling by 1.0 mL."
  say "  An alarm follows about three minutes in, on $faulted only,"
  say "  with its drift interval (mean-diff, in mL). The run lasts $((600 / speed)) s of wall time"
  say "  (10 simulated minutes); the alarm comes about $(min_sec "$in_s") in. Ctrl-C stops it earlier."
  echo

  # From here on a failing step must not end the script before both
  # processes are stopped: a Ctrl-C also ends the command running then.
  set +e
  local status_every=$(((15 + speed - 1) / speed)) last_status=$SECONDS name state p digest at
  local -a d
  local -A announced=()
  while ((stop == 0)); do
    sleep 1 || true
    ((stop == 0)) || break
    if ! alive "$daemon_pid"; then
      reason="the daemon exited on its own"
      break
    fi
    digest="$(api_streams_digest "$http")"
    while read -r name state p; do
      [[ -n "$name" ]] || continue
      if [[ "$state" == off && "${announced[$name]:-}" == on ]]; then
        announced[$name]=cleared
        say "alarm cleared on $name, $(min_sec $((SECONDS - started))) after the start"
      fi
      [[ "$state" == ON && "${announced[$name]:-}" != on ]] || continue
      announced[$name]=on
      read -r -a d <<<"$(api_stream_digest "$http" "$name")"
      at="-"
      if [[ "${d[5]:-"-"}" != "-" ]]; then
        at=$((${d[5]%%.*} - started_epoch))
        at="$(min_sec "$at") after the start (about $((at * speed)) simulated s)"
      fi
      say "ALARM raised on $name, $at: p = ${d[6]:-"-"}," \
        "drift ${d[4]:-"-"} ${d[8]:-"-"} [${d[7]:-"-"}, ${d[9]:-"-"}]"
    done <<<"$digest"
    if ((SECONDS - last_status >= status_every)); then
      last_status=$SECONDS
      local progress on
      progress="$(grep -o '[0-9.]* of [0-9.]* simulated s' "$dir/sim.log" | tail -n1 || true)"
      on="$(awk '$2 == "ON" { printf "%s%s", sep, $1; sep = "," }' <<<"$digest")"
      read -r -a d <<<"$(api_stream_digest "$http" "$faulted")"
      local last="no evaluation yet (windows filling)"
      if [[ "${d[0]:-"-"}" != "-" ]]; then
        last="p = ${d[0]}, drift ${d[4]:-"-"} ${d[2]:-"-"} [${d[1]:-"-"}, ${d[3]:-"-"}]"
      fi
      say "status $(min_sec $((SECONDS - started))): sent ${progress:-0 simulated s};" \
        "$faulted $last; alarms: ${on:-none}"
    fi
    if ! alive "$sim_pid" || [[ "$(cut -d' ' -f3 "/proc/$sim_pid/stat" 2>/dev/null)" == Z ]]; then
      reason="the scenario has been sent"
      break
    fi
    if ((limit > 0 && SECONDS - started >= limit)); then
      reason="PLUMBLINE_DEMO_SECONDS=$limit reached"
      break
    fi
  done
  trap - INT TERM
  set -e
  [[ -n "$reason" ]] || reason="interrupted"
  echo
  say "demo: stopping ($reason)"
  local daemon_code
  stop_pid "$sim_pid"
  say "demo: plumbline-sim send (pid $sim_pid) stopped, exit $stopped_code" \
    "(0: it sent the whole scenario; 1: stopped early)"
  tail -n 1 "$dir/sim.log" | sed 's/^/  /'
  if alive "$daemon_pid"; then
    echo
    say "Summary: the daemon's alarms scored against the scenario's ground truth"
    "$sim" score --truth "$dir/truth.json" --daemon "127.0.0.1:$http" | sed 's/^/  /; s/^ *$//' || true
    if ((stopped_code != 0)); then
      say "(stopped early: the score covers the whole 10-minute scenario, so a fault" \
        "the run had not reached shows as missed)"
    fi
  fi
  stop_pid "$daemon_pid"
  daemon_code=$stopped_code
  say "demo: plumbline serve (pid $daemon_pid) stopped, exit $daemon_code"
  sim_pid="" daemon_pid=""
  trap - EXIT
  if ((daemon_code != 0)); then
    echo "setup.sh: the daemon did not exit 0; its log:" >&2
    cat "$dir/daemon.log" >&2
    rm -rf "$dir"
    exit 1
  fi
  local alarms=("${!announced[@]}")
  say "demo: alarms raised on: ${alarms[*]:-none}"
  say "demo: done. Run it yourself: $bin serve --config $demo_config, then" \
    "$sim send --scenario $demo_scenario --to 127.0.0.1:7301. Results are advisory: they do not replace site quality procedures."
  rm -rf "$dir"
}

cmd_test() {
  cmd_build
  say "test: running every suite (unit, reference, calibration, cli, integration, deploy, e2e)"
  run ctest --test-dir build --output-on-failure --no-tests=error -j2
  say "test: done"
}

cmd_sanitize() {
  cmd_deps
  say "sanitize: configuring build-asan/ with AddressSanitizer + UndefinedBehaviorSanitizer"
  run cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo \
    -DPLUMBLINE_SANITIZE=address,undefined -DPLUMBLINE_BUILD_BENCH=OFF
  # Only the unit suite runs under the sanitizers, so only it (and the
  # plumbline binary it depends on) is compiled here.
  say "sanitize: compiling the unit suite with $(ncpu) jobs"
  run cmake --build build-asan -j"$(ncpu)" --target plumbline_unit_tests
  say "sanitize: running the unit suite under the sanitizers"
  run env ASAN_OPTIONS="${ASAN_OPTIONS:-detect_leaks=1}" \
    UBSAN_OPTIONS="${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}" \
    ctest --test-dir build-asan -L unit --output-on-failure --no-tests=error -j2
  say "sanitize: done"
}

cmd_tsan() {
  cmd_deps
  say "tsan: configuring build-tsan/ with ThreadSanitizer"
  run cmake -S . -B build-tsan -DCMAKE_BUILD_TYPE=RelWithDebInfo \
    -DPLUMBLINE_SANITIZE=thread -DPLUMBLINE_BUILD_BENCH=OFF
  say "tsan: compiling plumbline and the daemon's test suites with $(ncpu) jobs"
  run cmake --build build-tsan -j"$(ncpu)" --target plumbline plumbline_integration_tests \
    plumbline_unit_tests
  # A race report makes the instrumented daemon exit non-zero, which the
  # integration tests check on every stop.
  export TSAN_OPTIONS="${TSAN_OPTIONS:-halt_on_error=1 second_deadlock_stack=1}"
  say "tsan: the integration suite (the real daemon, instrumented)"
  run ctest --test-dir build-tsan -L integration --output-on-failure --no-tests=error -j2
  say "tsan: the daemon's unit cases (stream table, evaluator)"
  run ctest --test-dir build-tsan -L unit -R 'stream table|evaluator' --output-on-failure \
    --no-tests=error -j2
  say "tsan: done"
}

cmd_install() {
  local prefix="${PLUMBLINE_PREFIX:-/usr/local}"
  cmd_deps
  # The unit names the binary and the configuration by absolute paths, so the
  # prefix is set when CMake configures (deploy/CMakeLists.txt).
  say "install: configuring build/ for the install prefix $prefix"
  run cmake -S . -B build -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_INSTALL_PREFIX="$prefix"
  say "install: compiling plumbline with $(ncpu) jobs"
  run cmake --build build -j"$(ncpu)" --target plumbline
  if ((EUID != 0)) && [[ -z "${DESTDIR:-}" ]]; then
    echo "setup.sh: installing under $prefix needs root; run this as root" >&2
    exit 1
  fi
  run cmake --install build
  if [[ -z "${DESTDIR:-}" && -d /run/systemd/system ]]; then
    run systemctl daemon-reload
  fi
  local config
  config="$(sed -n 's/^ExecStart=.* --config //p' build/deploy/plumbline.service)"
  say "install: done. Configuration: $config; unit: $prefix/lib/systemd/system/plumbline.service"
  if [[ -n "${DESTDIR:-}" ]]; then
    say "install: staged under DESTDIR=$DESTDIR; nothing was installed on this machine"
  else
    say "install: start it with: systemctl enable --now plumbline; logs: journalctl -u plumbline"
  fi
}

# Compiles one source for the fuzz build into build-fuzz/obj/, unless the
# object is newer than the source and every header (a full rebuild is cheap
# enough that finer tracking is not worth it).
fuzz_cxx=(clang++-14 -std=c++20 -O1 -g -fno-omit-frame-pointer -ffp-contract=off
  -fsanitize=address,undefined -fno-sanitize-recover=undefined -I. -isystem /usr/include/eigen3)

fuzz_object() {
  local src="$1" flags="$2" obj
  obj="build-fuzz/obj/$(tr '/' '_' <<<"${src%.cc}").o"
  if [[ ! -f "$obj" || -n "$(find "$src" core daemon -name '*.h' -newer "$obj" -print -quit; \
    find "$src" -newer "$obj" -print -quit)" ]]; then
    run "${fuzz_cxx[@]}" "$flags" -c "$src" -o "$obj" >&2
  fi
  printf '%s\n' "$obj"
}

# Runs a fuzz target for $2 seconds on corpus $3 (seeds in $4, if any). A
# crash or an invariant failure makes libFuzzer exit non-zero and keep the
# input as build-fuzz/crash-*.
fuzz_run() {
  local target="$1" seconds="$2" corpus="$3" max_len="$4"
  mkdir -p "$corpus"
  say "fuzz: $target for $seconds s (corpus $corpus)"
  (cd build-fuzz && run "./$target" -max_total_time="$seconds" -max_len="$max_len" \
    -rss_limit_mb=2048 -malloc_limit_mb=1024 -timeout=10 -print_final_stats=1 \
    "${corpus#build-fuzz/}")
}

cmd_fuzz() {
  cmd_deps
  local snapshot_seconds="${FUZZ_SNAPSHOT_SECONDS:-60}" wire_seconds="${FUZZ_WIRE_SECONDS:-30}"
  mkdir -p build-fuzz/obj
  say "fuzz: compiling with clang-14 (AddressSanitizer, UndefinedBehaviorSanitizer, libFuzzer)"
  local -a core_objs
  local src
  for src in core/*.cc daemon/snapshot_format.cc; do
    core_objs+=("$(fuzz_object "$src" -fsanitize=fuzzer-no-link)")
  done
  local fuzz_obj seeds_obj wire_objs
  fuzz_obj="$(fuzz_object tests/fuzz/snapshot_fuzz.cc -fsanitize=fuzzer-no-link)"
  seeds_obj="$(fuzz_object tests/fuzz/snapshot_seeds.cc -fsanitize=fuzzer-no-link)"
  run "${fuzz_cxx[@]}" -fsanitize=fuzzer "${core_objs[@]}" "$fuzz_obj" -o build-fuzz/snapshot_fuzz
  run "${fuzz_cxx[@]}" -fsanitize=fuzzer-no-link "${core_objs[@]}" "$seeds_obj" \
    -o build-fuzz/snapshot_seeds
  wire_objs=("$(fuzz_object daemon/wire.cc -fsanitize=fuzzer-no-link)"
    "$(fuzz_object tests/fuzz/wire_fuzz.cc -fsanitize=fuzzer-no-link)")
  run "${fuzz_cxx[@]}" -fsanitize=fuzzer "${wire_objs[@]}" -o build-fuzz/wire_fuzz
  # Seeds: snapshots written by the encoder the daemon uses; for the wire
  # format, the example of tests/fuzz/README.md.
  mkdir -p build-fuzz/snapshot_corpus build-fuzz/wire_corpus
  run build-fuzz/snapshot_seeds build-fuzz/snapshot_corpus
  printf '\x00\x40\x12\x34\x56\x78larkspur/line_b/fill_4,1764633600.25,502.13\r\n# c\n\nlarkspur/x,1985-04-12T23:20:50.52Z,1,2\nq' \
    >build-fuzz/wire_corpus/seed1
  fuzz_run snapshot_fuzz "$snapshot_seconds" build-fuzz/snapshot_corpus 65536
  fuzz_run wire_fuzz "$wire_seconds" build-fuzz/wire_corpus 4096
  say "fuzz: done; no crash and no violated invariant"
}

main() {
  if (($# != 1)); then
    usage
    exit 2
  fi
  case "$1" in
    deps) cmd_deps ;;
    build) cmd_build ;;
    demo) cmd_demo ;;
    demo-run) cmd_demo_run ;;
    demo-compare) cmd_demo_compare ;;
    test) cmd_test ;;
    sanitize) cmd_sanitize ;;
    tsan) cmd_tsan ;;
    install) cmd_install ;;
    fuzz) cmd_fuzz ;;
    -h | --help | help)
      usage
      exit 0
      ;;
    *)
      echo "setup.sh: unknown command '$1'" >&2
      usage
      exit 2
      ;;
  esac
}

main "$@"
