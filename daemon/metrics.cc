// metrics.cc: see metrics.h.
#include "daemon/metrics.h"

#include <malloc.h>

#include <prometheus/text_serializer.h>

#include <algorithm>
#include <sstream>

#include "core/alarm.h"
#include "core/bootstrap.h"

namespace plumbline {

namespace pm = prometheus;

namespace {

pm::MetricFamily family(std::string name, std::string help, pm::MetricType type) {
  pm::MetricFamily f;
  f.name = std::move(name);
  f.help = std::move(help);
  f.type = type;
  return f;
}

void add(pm::MetricFamily& f, std::vector<pm::ClientMetric::Label> labels, double value) {
  pm::ClientMetric m;
  m.label = std::move(labels);
  if (f.type == pm::MetricType::Counter) {
    m.counter.value = value;
  } else {
    m.gauge.value = value;
  }
  f.metric.push_back(std::move(m));
}

std::string quantity_label(const interval_result& r) {
  std::string q(quantity_name(r.quantity));
  if (r.quantity == drift_quantity::quantile_diff) {
    std::ostringstream o;
    o << q << ":" << r.quantile;
    return o.str();
  }
  return q;
}

}  // namespace

daemon_metrics::daemon_metrics(const stream_table& streams, const ingest_counters& ingest,
                               const std::string& version)
    : streams_(streams),
      ingest_(ingest),
      version_(version),
      registry_(std::make_shared<pm::Registry>()) {
  auto& fam = pm::BuildHistogram()
                  .Name("plumbline_evaluation_seconds")
                  .Help(
                      "Wall time of one stream evaluation (all its tests and its interval), "
                      "in seconds.")
                  .Register(*registry_);
  const pm::Histogram::BucketBoundaries buckets{0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05,
                                                0.1,    0.25,  0.5,    1,     2.5,  5,     10};
  evaluation_seconds_ = &fam.Add({}, buckets);
  auto& lat = pm::BuildHistogram()
                  .Name("plumbline_evaluation_latency_seconds")
                  .Help(
                      "Time from a stream's evaluation request (enough new samples, or its "
                      "timer) to its result, queueing included, in seconds.")
                  .Register(*registry_);
  evaluation_latency_ = &lat.Add({}, buckets);
}

daemon_metrics::~daemon_metrics() = default;

std::string daemon_metrics::render() const {
  std::string text = render_text();
  // A scrape builds one labelled series object per stream and metric, all
  // short-lived: with 10,000 streams some tens of megabytes. glibc keeps
  // freed pages mapped, so without this the resident memory would keep the
  // high-water mark of a scrape; malloc_trim returns them to the system (a
  // few milliseconds per scrape).
  malloc_trim(0);
  return text;
}

std::string daemon_metrics::render_text() const {
  using T = pm::MetricType;
  std::vector<pm::MetricFamily> out = registry_->Collect();

  auto alarm = family("plumbline_alarm", alarm_help, T::Gauge);
  auto raised = family("plumbline_alarms_raised_total",
                       "Alarms raised on the stream since it was first seen (kept across "
                       "restarts by snapshots).",
                       T::Counter);
  auto p_value = family("plumbline_p_value",
                        "p-value of the stream's last evaluation, per permutation test.", T::Gauge);
  auto statistic =
      family("plumbline_test_statistic",
             "Observed test statistic of the stream's last evaluation, per test.", T::Gauge);
  auto lower =
      family("plumbline_drift_lower",
             "Lower end of the last bootstrap drift interval, in the quantity's units.", T::Gauge);
  auto estimate = family("plumbline_drift_estimate",
                         "Point estimate of the last drift (recent against reference).", T::Gauge);
  auto upper =
      family("plumbline_drift_upper",
             "Upper end of the last bootstrap drift interval, in the quantity's units.", T::Gauge);
  auto window = family("plumbline_window_samples",
                       "Samples held in the stream's reference and recent windows.", T::Gauge);
  auto samples = family("plumbline_samples_total", "Samples accepted for the stream.", T::Counter);
  auto evaluations = family("plumbline_evaluations_total",
                            "Evaluations of the stream since it was first seen (kept across "
                            "restarts by snapshots).",
                            T::Counter);
  auto last_sample = family("plumbline_last_sample_timestamp_seconds",
                            "Time of the stream's newest sample (its TIME field, or receipt "
                            "time), Unix seconds.",
                            T::Gauge);
  auto last_eval = family("plumbline_last_evaluation_timestamp_seconds",
                          "When the stream was last evaluated, Unix seconds.", T::Gauge);

  streams_.for_each([&](const stream_entry& e) {
    const std::vector<pm::ClientMetric::Label> s{{"stream", e.name}};
    std::lock_guard lock(e.mu);
    const stream_monitor& m = e.monitor;
    add(alarm, s, m.alarm().active() ? 1 : 0);
    add(raised, s, static_cast<double>(m.alarm().raised_total()));
    add(window, {{"stream", e.name}, {"window", "reference"}},
        static_cast<double>(m.reference_fill()));
    add(window, {{"stream", e.name}, {"window", "recent"}}, static_cast<double>(m.recent_fill()));
    add(samples, s, static_cast<double>(m.samples_total()));
    add(evaluations, s, static_cast<double>(e.evaluations));
    if (m.samples_total() > 0) add(last_sample, s, e.last_sample_time);
    if (e.evaluations > 0) add(last_eval, s, e.last_evaluation_time);
    if (const auto& r = m.last_result()) {
      for (const test_outcome& t : r->tests) {
        if (!t.ok) continue;
        const std::vector<pm::ClientMetric::Label> st{{"stream", e.name},
                                                      {"test", std::string(t.name())}};
        add(p_value, st, t.result.p_value);
        add(statistic, st, t.result.statistic);
      }
      if (r->interval) {
        const std::vector<pm::ClientMetric::Label> sq{{"stream", e.name},
                                                      {"quantity", quantity_label(*r->interval)}};
        add(lower, sq, r->interval->lower);
        add(estimate, sq, r->interval->estimate);
        add(upper, sq, r->interval->upper);
      }
    }
  });
  for (auto* f : {&alarm, &raised, &p_value, &statistic, &lower, &estimate, &upper, &window,
                  &samples, &evaluations, &last_sample, &last_eval}) {
    out.push_back(std::move(*f));
  }

  auto rejected =
      family("plumbline_lines_rejected_total",
             "Ingest lines dropped, by reason; the lines around them are kept.", T::Counter);
  for (std::size_t i = 0; i < wire::reject_reason_count; ++i) {
    add(rejected, {{"reason", std::string(wire::reason_name(static_cast<wire::reject_reason>(i)))}},
        static_cast<double>(ingest_.rejected[i].load(std::memory_order_relaxed)));
  }
  out.push_back(std::move(rejected));
  auto records =
      family("plumbline_records_total", "Ingest records accepted, all streams.", T::Counter);
  add(records, {}, static_cast<double>(ingest_.records.load(std::memory_order_relaxed)));
  out.push_back(std::move(records));
  auto coalesced = family("plumbline_evaluations_coalesced_total",
                          "Evaluation requests merged into one already pending for the same "
                          "stream because evaluation fell behind (no sample is dropped).",
                          T::Counter);
  add(coalesced, {}, eval_ ? static_cast<double>(eval_->coalesced()) : 0);
  out.push_back(std::move(coalesced));
  auto queue = family("plumbline_evaluation_queue_length",
                      "Streams waiting for an evaluation worker.", T::Gauge);
  add(queue, {}, eval_ ? static_cast<double>(eval_->queued()) : 0);
  out.push_back(std::move(queue));
  auto streams = family("plumbline_streams", "Streams known to the daemon.", T::Gauge);
  add(streams, {}, static_cast<double>(streams_.size()));
  out.push_back(std::move(streams));
  auto limit = family("plumbline_streams_limit",
                      "The most streams the daemon accepts (ingest.max_streams).", T::Gauge);
  add(limit, {}, static_cast<double>(streams_.max_streams()));
  out.push_back(std::move(limit));
  auto conns = family("plumbline_connections", "Open ingest TCP connections.", T::Gauge);
  add(conns, {}, static_cast<double>(ingest_.connections_open.load(std::memory_order_relaxed)));
  out.push_back(std::move(conns));
  auto refused = family("plumbline_connections_refused_total",
                        "Ingest TCP connections closed at once because the connection limit "
                        "was reached.",
                        T::Counter);
  add(refused, {},
      static_cast<double>(ingest_.connections_refused.load(std::memory_order_relaxed)));
  out.push_back(std::move(refused));
  if (state_ != nullptr) {
    const double last = state_->last_good_time.load();
    if (snapshots_on_ && last > 0) {
      auto age = family("plumbline_snapshot_age_seconds",
                        "Seconds since the newest good snapshot was written (absent while "
                        "there is none, or snapshots are off).",
                        T::Gauge);
      add(age, {}, std::max(0.0, unix_now() - last));
      out.push_back(std::move(age));
    }
    auto failures = family("plumbline_snapshot_failures_total",
                           "Snapshot writes that failed since the daemon started.", T::Counter);
    add(failures, {}, static_cast<double>(state_->failures.load()));
    out.push_back(std::move(failures));
    auto reload = family("plumbline_config_reload_success",
                         "1 when the last configuration reload succeeded (or none was tried), 0 "
                         "after a refused one until a good reload.",
                         T::Gauge);
    add(reload, {}, state_->reload_ok.load());
    out.push_back(std::move(reload));
  }
  auto info = family("plumbline_build_info", "Always 1; the version label says which build runs.",
                     T::Gauge);
  add(info, {{"version", version_}}, 1);
  out.push_back(std::move(info));

  std::ostringstream text;
  pm::TextSerializer().Serialize(text, out);
  return text.str();
}

}  // namespace plumbline
