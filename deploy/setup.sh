#!/usr/bin/env bash
# deploy/setup.sh: install, build, test and demonstrate plumbline on Debian 12.
#
# Usage: bash deploy/setup.sh deps|build|demo|test|sanitize|tsan|fuzz|install
#
#   deps      install the Debian packages the build and the tests need
#             (skipped when all of them are installed already)
#   build     deps, then a RelWithDebInfo build in build/
#   demo      build, then compare the demo data in simulator/examples/, then
#             run `plumbline serve` briefly and feed it the same data live
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
  demo      build, then run `plumbline compare` on the demo data, then the daemon live
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

cmd_demo() {
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
