// load.h: `plumbline-sim load`, traffic as fast as the daemon takes it.
//
// Purpose. The daemon's throughput benchmark (tests/bench/ingest_bench.py) and
// anyone sizing a deployment need a sender that is not itself the bottleneck.
// run_load() renders, before the clock starts, one buffer of wire-format
// records per connection (daemon/wire.h: `STREAM,,VALUE`, receipt time), then
// writes those buffers round and round over `connections` TCP connections,
// one thread each, until `records` records are sent or `duration_seconds`
// have passed. Stream i of `streams` is named `<prefix><i>` and is fed by
// connection i mod connections only, so each stream's samples arrive in
// order. Values are in-control normal draws (mean 100, sd 1) rounded to the
// instrument resolution 0.001, from the seed.
//
// The sender counts what the kernel accepted (write() returned), not what the
// daemon parsed: compare with the daemon's plumbline_samples_total.
//
// Thread-safety: run_load() is a blocking call that starts and joins its own
// threads; the progress callback is called from the calling thread only.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "core/status.h"

namespace plumbline::sim {

struct load_options {
  std::string host = "127.0.0.1";
  uint16_t port = 0;
  uint64_t streams = 10'000;        // 1 .. 10,000,000
  uint32_t connections = 4;         // 1 .. 1024
  uint64_t records = 0;             // total to send; 0 = until duration_seconds
  double duration_seconds = 10;     // > 0; stops first of records / duration
  uint64_t seed = 1;
  std::string prefix = "load.s";    // stream names: prefix + index
  uint32_t dimension = 1;           // values per record, 1 .. 64
  uint64_t buffer_records = 1 << 20;  // records rendered per connection, >= streams/connections
  double rate = 0;  // records per second, all connections together; 0 = as fast as accepted
  // Before the clock starts, stream i gets floor(stagger * i / streams)
  // records of its own (0 .. 1,000,000), so that streams that count their
  // samples (an evaluation every k) are out of step, as in a real fleet,
  // instead of all reaching k at once. Not counted in records_sent.
  uint64_t stagger = 0;
};

struct load_progress {
  uint64_t records_sent = 0;
  double seconds = 0;
};

struct load_report {
  uint64_t records_sent = 0;
  uint64_t bytes_sent = 0;
  uint64_t stagger_records = 0;  // sent before the clock started
  double seconds = 0;  // from the first write to the last
  double records_per_second() const { return seconds > 0 ? records_sent / seconds : 0; }
};

// The bytes connection `connection` of run_load(options) sends, round and
// round: a whole number of rounds over its streams, at least buffer_records
// records; ends[i] is the offset just past record i's newline. Exposed for
// the ingest benchmark's in-process baselines, which parse the same bytes.
// REQUIRES: the options pass run_load's checks; connection < connections.
struct rendered_records {
  std::string bytes;
  std::vector<uint64_t> ends;
};
rendered_records render_records(const load_options& options, uint32_t connection);

// Checks the options (a message naming the bad one), connects every
// connection first (failing before sending anything when one cannot), then
// sends. `progress`, when set, is called about once a second.
expected<load_report> run_load(const load_options& options,
                               const std::function<void(const load_progress&)>& progress = {});

}  // namespace plumbline::sim
