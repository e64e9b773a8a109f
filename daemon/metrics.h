// metrics.h: the daemon's Prometheus metrics.
//
// Purpose. Dashboards draw each stream's drift interval as a band and alert
// rules page people on its alarm; both read the series defined here. The
// names are part of plumbline's interface (README lists them):
//
//   per stream     plumbline_alarm{stream}, plumbline_alarms_raised_total{stream},
//                  plumbline_p_value{stream,test}, plumbline_test_statistic{stream,test},
//                  plumbline_drift_lower / _estimate / _upper{stream,quantity},
//                  plumbline_window_samples{stream,window}, plumbline_samples_total{stream},
//                  plumbline_evaluations_total{stream},
//                  plumbline_last_sample_timestamp_seconds{stream},
//                  plumbline_last_evaluation_timestamp_seconds{stream}
//   daemon         plumbline_lines_rejected_total{reason}, plumbline_records_total,
//                  plumbline_evaluation_seconds and plumbline_evaluation_latency_seconds
//                  (histograms),
//                  plumbline_evaluations_coalesced_total, plumbline_evaluation_queue_length,
//                  plumbline_streams, plumbline_streams_limit, plumbline_connections,
//                  plumbline_connections_refused_total, plumbline_build_info{version},
//                  plumbline_snapshot_age_seconds, plumbline_snapshot_failures_total,
//                  plumbline_config_reload_success
//
// How. The evaluation-time histogram is a prometheus-cpp metric in the
// registry (workers observe into it). Everything else already lives in the
// daemon's own counters and stream state, so it is read at scrape time by a
// prometheus::Collectable (one pass over the streams, each under its lock for
// a few microseconds) instead of being mirrored into prometheus-cpp objects
// on the ingest path. render() serializes both with prometheus-cpp's
// TextSerializer.
//
// Thread-safety. render() and observe_evaluation() from any thread.
#pragma once

#include <prometheus/histogram.h>
#include <prometheus/registry.h>

#include <memory>
#include <string>

#include "daemon/evaluator.h"
#include "daemon/ingest.h"
#include "daemon/snapshot.h"
#include "daemon/stream_table.h"

namespace plumbline {

// The HELP text of plumbline_alarm: the caution every reader of the metric sees.
inline constexpr const char* alarm_help =
    "1 while the stream's drift alarm is raised, else 0. Advisory only: an alarm "
    "asks an engineer to look; it does not replace site quality procedures, "
    "inspection plans or a qualified engineer's judgement, and plumbline is no "
    "safety interlock.";

class daemon_metrics {
 public:
  daemon_metrics(const stream_table& streams, const ingest_counters& ingest,
                 const std::string& version);
  ~daemon_metrics();

  // REQUIRES: called before render() may run; the evaluator outlives this.
  void attach(const evaluator& eval) { eval_ = &eval; }
  // The snapshot and reload status (outlives this); `snapshots_on` false
  // leaves out the snapshot age.
  void attach(const snapshot::status& st, bool snapshots_on) {
    state_ = &st;
    snapshots_on_ = snapshots_on;
  }

  void observe_evaluation(double seconds, double latency) {
    evaluation_seconds_->Observe(seconds);
    evaluation_latency_->Observe(latency);
  }

  // The whole exposition, Prometheus text format 0.0.4.
  std::string render() const;

 private:
  std::string render_text() const;

  const stream_table& streams_;
  const ingest_counters& ingest_;
  const evaluator* eval_ = nullptr;
  const snapshot::status* state_ = nullptr;
  bool snapshots_on_ = false;
  std::string version_;
  std::shared_ptr<prometheus::Registry> registry_;
  prometheus::Histogram* evaluation_seconds_;
  prometheus::Histogram* evaluation_latency_;
};

}  // namespace plumbline
