// monitor.cc: one stream's windows, evaluation and alarm (monitor.h).
//
// Design note. The monitor owns no randomness and no policy of its own
// beyond routing samples: evaluate() is a fixed sequence of engine calls
// (permutation_engine::run per test, in listed order, then
// bootstrap_engine::run), all on the one generator passed in, so an
// evaluation reproduces bit for bit from (generator state, windows,
// settings) and equals the same engine calls made directly. Windows are
// copied oldest first because order matters to the engines' block modes.
//
// Lagged routing moves the recent window's oldest sample into the reference
// before pushing the new one, which is exactly "the sample evicted from the
// recent window enters the reference": after t pushes with t >= recent_size,
// the recent window holds samples t - recent_size + 1 .. t and the reference
// the reference_size samples before them (fewer while it fills).
//
// stream_seed. FNV-1a spreads the name's bytes over 64 bits; splitmix64's
// finaliser (a bijection on 64-bit words) is applied to the daemon seed
// before the XOR, so that neighbouring daemon seeds do not cancel
// neighbouring name hashes, and to the XOR itself, so that the seeds of
// similar names differ in about half their bits. evaluation_seed mixes the
// evaluation number the same way before the XOR, so that consecutive
// evaluations of one stream, and the same evaluation of two streams, get
// unrelated seeds.
#include "core/monitor.h"

#include <cassert>
#include <cmath>
#include <string>
#include <utility>

namespace plumbline {

namespace {

uint64_t mix(uint64_t x) {
  return splitmix64(x).next();
}

std::string samples_text(std::size_t n) {
  return std::to_string(n) + (n == 1 ? " sample" : " samples");
}

}  // namespace

std::string_view policy_name(reference_policy p) {
  switch (p) {
    case reference_policy::baseline:
      return "baseline";
    case reference_policy::lagged:
      return "lagged";
    case reference_policy::file:
      return "file";
  }
  return "baseline";
}

uint64_t fnv1a64(std::string_view text) {
  uint64_t h = 0xcbf29ce484222325ULL;
  for (const char c : text) {
    h ^= static_cast<unsigned char>(c);
    h *= 0x100000001b3ULL;
  }
  return h;
}

uint64_t stream_seed(uint64_t daemon_seed, std::string_view stream_name) {
  return mix(mix(daemon_seed) ^ fnv1a64(stream_name));
}

uint64_t evaluation_seed(uint64_t stream_seed, uint64_t evaluation) {
  return mix(stream_seed ^ mix(evaluation));
}

double interval_null_value(const interval_result& r) {
  switch (r.quantity) {
    case drift_quantity::sd_ratio:
      return 1;
    case drift_quantity::cpk:
      return r.reference_value;
    case drift_quantity::mean_diff:
    case drift_quantity::median_diff:
    case drift_quantity::quantile_diff:
      return 0;
  }
  return 0;
}

std::optional<drift_interval> evaluation_result::alarm_interval() const {
  if (!interval) return std::nullopt;
  const drift_interval d{interval->lower, interval->estimate, interval->upper,
                         interval_null_value(*interval)};
  if (!std::isfinite(d.lower) || !std::isfinite(d.estimate) || !std::isfinite(d.upper) ||
      !std::isfinite(d.null_value))
    return std::nullopt;
  return d;
}

stream_monitor::stream_monitor(const monitor_settings& settings, std::size_t dimension)
    : stream_monitor(std::make_shared<const monitor_settings>(settings), dimension) {}

stream_monitor::stream_monitor(std::shared_ptr<const monitor_settings> settings,
                               std::size_t dimension)
    : settings_(std::move(settings)),
      dim_(dimension < 1 ? 1 : dimension),
      windows_(new_windows(*settings_, dim_)),
      alarm_(settings_->alarm) {
  assert(dimension >= 1);
  assert(settings_->reference_size >= 1 && settings_->recent_size >= 1);
}

stream_monitor::window_pair stream_monitor::new_windows(const monitor_settings& s,
                                                        std::size_t dim) {
  const std::size_t ref_cap = s.reference_size < 1 ? 1 : s.reference_size;
  const std::size_t rec_cap = s.recent_size < 1 ? 1 : s.recent_size;
  if (dim == 1) return univariate_windows{sample_window(ref_cap), sample_window(rec_cap)};
  return multivariate_windows{row_window(ref_cap, dim), row_window(rec_cap, dim)};
}

void stream_monitor::prefetch_state() const {
  __builtin_prefetch(&settings_);
  __builtin_prefetch(&dim_);
  __builtin_prefetch(&windows_);
  __builtin_prefetch(reinterpret_cast<const char*>(&windows_) + 64);
  __builtin_prefetch(&samples_total_);
}

void stream_monitor::prefetch_window() const {
  if (dim_ != 1) return;
  switch (settings_->policy) {
    case reference_policy::baseline:
      __builtin_prefetch(ref_1().full() ? rec_1().next_slot() : ref_1().next_slot(), 1);
      break;
    case reference_policy::lagged:
      __builtin_prefetch(rec_1().next_slot(), 1);
      __builtin_prefetch(ref_1().next_slot(), 1);
      break;
    case reference_policy::file:
      __builtin_prefetch(rec_1().next_slot(), 1);
      break;
  }
}

expected<bool> stream_monitor::push(std::span<const double> values) {
  if (values.size() != dim_) {
    ++rejected_total_;
    return make_error("sample has " + std::to_string(values.size()) +
                      (values.size() == 1 ? " value" : " values") + "; this stream takes " +
                      std::to_string(dim_));
  }
  for (std::size_t i = 0; i < values.size(); ++i) {
    if (!std::isfinite(values[i])) {
      ++rejected_total_;
      return make_error(dim_ == 1 ? std::string("sample is NaN or infinite")
                                  : "value " + std::to_string(i + 1) + " of " +
                                        std::to_string(dim_) + " is NaN or infinite");
    }
  }
  if (dim_ == 1) {
    const double x = values[0];
    switch (settings_->policy) {
      case reference_policy::baseline:
        if (!ref_1().full()) {
          ref_1().push(x);
        } else {
          rec_1().push(x);
        }
        break;
      case reference_policy::lagged:
        if (rec_1().full()) ref_1().push(rec_1()[0]);
        rec_1().push(x);
        break;
      case reference_policy::file:
        rec_1().push(x);
        break;
    }
  } else {
    switch (settings_->policy) {
      case reference_policy::baseline:
        if (!ref_n().full()) {
          ref_n().push(values);
        } else {
          rec_n().push(values);
        }
        break;
      case reference_policy::lagged:
        if (rec_n().full()) ref_n().push(std::span<const double>(rec_n().row(0).data(), dim_));
        rec_n().push(values);
        break;
      case reference_policy::file:
        rec_n().push(values);
        break;
    }
  }
  ++samples_total_;
  ++since_evaluation_;
  return true;
}

expected<bool> stream_monitor::set_reference(std::span<const double> values) {
  if (settings_->policy != reference_policy::file)
    return make_error(
        "a reference can be loaded only under the file reference policy; this "
        "stream uses the " +
        std::string(policy_name(settings_->policy)) + " policy");
  if (values.size() % dim_ != 0)
    return make_error("reference holds " + std::to_string(values.size()) +
                      " values, not a whole number of samples of " + std::to_string(dim_));
  const std::size_t samples = values.size() / dim_;
  if (samples < 2)
    return make_error("reference has " + samples_text(samples) + "; at least 2 are needed");
  if (samples > settings_->reference_size)
    return make_error("reference has " + samples_text(samples) + ", more than reference_size " +
                      std::to_string(settings_->reference_size));
  for (std::size_t i = 0; i < values.size(); ++i)
    if (!std::isfinite(values[i]))
      return make_error("reference sample " + std::to_string(i / dim_ + 1) +
                        " holds a value that is NaN or infinite");
  if (dim_ == 1) {
    ref_1().clear();
    ref_1().set_capacity(samples);
    for (const double x : values)
      ref_1().push(x);
  } else {
    ref_n().clear();
    ref_n().set_capacity(samples);
    for (std::size_t i = 0; i < samples; ++i)
      ref_n().push(values.subspan(i * dim_, dim_));
  }
  ++generation_;
  return true;
}

expected<bool> stream_monitor::set_reference(const Eigen::MatrixXd& rows) {
  if (static_cast<std::size_t>(rows.cols()) != dim_)
    return make_error("reference rows have " + std::to_string(rows.cols()) +
                      " values; this stream takes " + std::to_string(dim_));
  std::vector<double> flat(static_cast<std::size_t>(rows.size()));
  for (Eigen::Index i = 0; i < rows.rows(); ++i)
    for (Eigen::Index j = 0; j < rows.cols(); ++j)
      flat[static_cast<std::size_t>(i * rows.cols() + j)] = rows(i, j);
  return set_reference(std::span<const double>(flat));
}

bool stream_monitor::reference_full() const {
  return dim_ == 1 ? ref_1().full() : ref_n().full();
}
bool stream_monitor::recent_full() const {
  return dim_ == 1 ? rec_1().full() : rec_n().full();
}

std::size_t stream_monitor::reference_fill() const {
  return dim_ == 1 ? ref_1().size() : ref_n().size();
}
std::size_t stream_monitor::recent_fill() const {
  return dim_ == 1 ? rec_1().size() : rec_n().size();
}
std::size_t stream_monitor::reference_capacity() const {
  return dim_ == 1 ? ref_1().capacity() : ref_n().capacity();
}
std::size_t stream_monitor::recent_capacity() const {
  return dim_ == 1 ? rec_1().capacity() : rec_n().capacity();
}

void stream_monitor::capture(evaluation_input& in) const {
  in.dimension = dim_;
  if (dim_ == 1) {
    ref_1().copy_to(in.reference);
    rec_1().copy_to(in.recent);
  } else {
    ref_n().copy_to(in.reference_rows);
    rec_n().copy_to(in.recent_rows);
  }
  in.samples_total = samples_total_;
  in.generation = generation_;
}

evaluation_result stream_monitor::evaluate(const evaluation_input& in, const monitor_settings& s,
                                           evaluation_scratch& scratch, rng& gen) {
  evaluation_result r;
  const bool univariate = in.dimension <= 1;
  r.dimension = univariate ? 1 : in.dimension;
  r.samples_total = in.samples_total;
  r.generation = in.generation;
  r.n_reference =
      univariate ? in.reference.size() : static_cast<std::size_t>(in.reference_rows.rows());
  r.n_recent = univariate ? in.recent.size() : static_cast<std::size_t>(in.recent_rows.rows());

  permutation_options options = s.permutation;
  auto run_test = [&](test_kind t) {
    options.test = t;
    test_outcome out;
    out.test = t;
    auto res = univariate
                   ? scratch.permutation.run(std::span<const double>(in.reference),
                                             std::span<const double>(in.recent), options, gen)
                   : scratch.permutation.run(in.reference_rows, in.recent_rows, options, gen);
    if (res.ok()) {
      out.ok = true;
      out.result = res.value();
    } else {
      out.error = res.err().message;
    }
    r.tests.push_back(std::move(out));
  };

  if (univariate) {
    r.tests.reserve(s.tests.size());
    for (const test_kind t : s.tests)
      run_test(t);
  } else {
    r.tests.reserve(s.tests.size() + 1);
    for (const test_kind t : s.tests)
      if (is_multivariate(t)) run_test(t);
    if (r.tests.empty()) run_test(test_kind::energy);
  }

  if (univariate && s.interval) {
    r.interval_requested = true;
    auto res = scratch.bootstrap.run(std::span<const double>(in.reference),
                                     std::span<const double>(in.recent), *s.interval, gen);
    if (res.ok()) {
      r.interval = std::move(res.value());
    } else {
      r.interval_error = res.err().message;
    }
  }

  if (r.tests.empty()) {
    r.error = "no test is configured for this stream; the evaluation counts as quiet";
  } else if (!r.tests.front().ok) {
    r.error = "test " + std::string(r.tests.front().name()) + " failed: " + r.tests.front().error +
              "; the evaluation counts as quiet";
  }
  return r;
}

bool stream_monitor::accept(const evaluation_result& r, double time,
                            std::optional<alarm_event>& event, std::string& error) {
  if (r.generation != generation_ || r.samples_total > samples_total_) {
    ++stale_total_;
    return false;
  }
  since_evaluation_ = samples_total_ - r.samples_total;
  ++evaluations_total_;
  if (r.driving_ok() && std::isfinite(r.tests.front().result.p_value)) {
    event = alarm_.update(time, r.tests.front().result.p_value, r.alarm_interval());
    return true;
  }
  if (r.driving_ok())
    error = "test " + std::string(r.tests.front().name()) +
            " gave a p-value that is not a number; the evaluation counts as quiet";
  ++failed_total_;
  event = alarm_.update_quiet(time);
  return true;
}

std::optional<alarm_event> stream_monitor::record(const evaluation_result& r, double time) {
  std::optional<alarm_event> event;
  std::string error;
  if (!accept(r, time, event, error)) return std::nullopt;
  if (last_) {
    *last_ = r;
  } else {
    last_ = std::make_unique<evaluation_result>(r);
  }
  if (!error.empty()) last_->error = std::move(error);
  return event;
}

std::optional<alarm_event> stream_monitor::record(evaluation_result&& r, double time) {
  std::optional<alarm_event> event;
  std::string error;
  if (!accept(r, time, event, error)) return std::nullopt;
  if (last_) {
    *last_ = std::move(r);
  } else {
    last_ = std::make_unique<evaluation_result>(std::move(r));
  }
  if (!error.empty()) last_->error = std::move(error);
  return event;
}

std::optional<alarm_event> stream_monitor::rebaseline(double time) {
  switch (settings_->policy) {
    case reference_policy::baseline:
    case reference_policy::lagged:
      if (dim_ == 1) {
        ref_1().clear();
        rec_1().clear();
      } else {
        ref_n().clear();
        rec_n().clear();
      }
      break;
    case reference_policy::file:
      if (dim_ == 1) {
        rec_1().clear();
      } else {
        rec_n().clear();
      }
      break;
  }
  since_evaluation_ = 0;
  ++generation_;
  ++rebaselines_total_;
  return alarm_.rebaseline(time);
}

std::optional<alarm_event> stream_monitor::apply_settings(const monitor_settings& s,
                                                          double time) {
  return apply_settings(std::make_shared<const monitor_settings>(s), time);
}

std::optional<alarm_event> stream_monitor::apply_settings(
    std::shared_ptr<const monitor_settings> shared, double time) {
  const monitor_settings& s = *shared;
  assert(s.reference_size >= 1 && s.recent_size >= 1);
  const std::size_t ref_cap = s.reference_size < 1 ? 1 : s.reference_size;
  const std::size_t rec_cap = s.recent_size < 1 ? 1 : s.recent_size;
  alarm_.set_rule(s.alarm);
  if (s.policy != settings_->policy) {
    settings_ = std::move(shared);
    windows_ = new_windows(s, dim_);
    since_evaluation_ = 0;
    ++generation_;
    ++rebaselines_total_;
    return alarm_.rebaseline(time);
  }
  bool changed = false;
  auto resize = [&changed](auto& w, std::size_t cap) {
    if (w.capacity() == cap) return;
    w.set_capacity(cap);
    changed = true;
  };
  if (dim_ == 1) {
    if (s.policy != reference_policy::file) resize(ref_1(), ref_cap);
    resize(rec_1(), rec_cap);
  } else {
    if (s.policy != reference_policy::file) resize(ref_n(), ref_cap);
    resize(rec_n(), rec_cap);
  }
  settings_ = std::move(shared);
  if (changed) ++generation_;
  return std::nullopt;
}

}  // namespace plumbline
