// monitor.h: the monitor of one measurement stream.
//
// Purpose. A `stream_monitor` holds one stream's reference and recent
// windows, decides when the stream is due for an evaluation, runs the tests
// and the drift interval of its `monitor_settings` between the two windows,
// and feeds the driving result to the stream's `alarm_state`. The daemon
// drives it: push() per sample, capture() / evaluate() / record() when due,
// rebaseline() on request.
//
// Windows. Dimension 1 keeps `sample_window`s, dimension >= 2 keeps
// `row_window`s of that many values per sample. The reference policy decides
// where a sample goes (monitor_settings.h):
//   baseline  into the reference until it holds reference_size samples, then
//             into the recent window; the reference is frozen until
//             rebaseline(), which empties both windows to collect anew.
//   lagged    into the recent window; the sample it evicts (its oldest, once
//             full) moves into the reference, which slides in turn.
//             rebaseline() empties both.
//   file      into the recent window; the reference comes from
//             set_reference() and stays frozen (rebaseline() empties the
//             recent window only). A file reference of k samples sets the
//             reference capacity to k (2 <= k <= reference_size).
// ready() = both windows full. due_by_count() = ready() and at least
// every_samples samples have arrived since the last record() (0 = never).
//
// Evaluation is split in three so that the daemon can copy under the
// stream's lock and compute outside it:
//   capture(in)   O(window) copy of both windows, oldest first, into the
//                 caller's buffers (no allocation once they are warm);
//   evaluate(in, settings, scratch, gen)   pure: the result is a function of
//                 (in, settings, the generator's state) alone. It runs every
//                 test of settings.tests in listed order (a stream of
//                 dimension >= 2 runs only the multivariate ones, energy when
//                 none is listed), then the drift interval (dimension 1 only),
//                 all drawing from `gen` in that order, with the engines kept
//                 in `scratch`; the monitor adds no randomness of its own.
//                 Engine errors are recorded as messages, never thrown;
//   record(r, time)   feeds the alarm with the first test's p-value and the
//                 interval, keeps r as last_result(). When the first test
//                 failed (or none ran) the evaluation counts as quiet and
//                 r.error says why; no NaN ever reaches the alarm.
// A result captured before a rebaseline() or set_reference() describes
// windows that are gone: record() drops it (stale_results_total()).
//
// Seeds. stream_seed(daemon_seed, name) derives each stream's seed and
// evaluation_seed(stream seed, k) the seed of its k-th evaluation (below), so
// every evaluation of every stream has its own reproducible random stream.
//
// Reload. apply_settings(s, time) moves a running stream to new settings:
//   same policy   a window whose size changed keeps its newest samples that
//                 fit (set_capacity); under the file policy the reference
//                 keeps the capacity its file gave it. A baseline reference
//                 made larger is open again: the next samples fill it before
//                 the recent window moves. Tests, resampling budget, interval,
//                 cadence and the alarm rule take effect at the next
//                 evaluation; the alarm keeps its state and its newest
//                 history_limit events.
//   new policy    the windows are rebuilt empty at the new sizes and the
//                 change acts as a rebaseline (an active alarm clears with
//                 cause rebaseline).
// A change of either window bumps the generation, so that a result captured
// before it is dropped as stale.
//
// Snapshots. core/state_codec.h writes and reads the monitor's complete state
// (windows with their running sums, alarm, counters) as bytes.
//
// Thread-safety: none. One owner; the daemon locks per stream around push(),
// capture(), record() and rebaseline(). evaluate() is static and touches only
// its arguments: it may run on any thread with its own scratch and rng.
//
// Invariants. reference_fill() <= reference_capacity(), recent_fill() <=
// recent_capacity(); push() never allocates after construction and rejects
// (with an error, keeping the windows unchanged) a sample of the wrong size
// or with a NaN or infinite value.
#pragma once

#include <Eigen/Core>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include "core/alarm.h"
#include "core/bootstrap.h"
#include "core/monitor_settings.h"
#include "core/permutation.h"
#include "core/rng.h"
#include "core/status.h"
#include "core/window.h"

namespace plumbline {

// FNV-1a, 64-bit (Fowler, Noll & Vo; offset basis 0xcbf29ce484222325, prime
// 0x100000001b3), over the bytes of `text`.
uint64_t fnv1a64(std::string_view text);

// The seed of one stream, from which its evaluations' seeds derive:
//   mix(mix(daemon_seed) ^ fnv1a64(stream_name)),
// where mix(x) is the first output of splitmix64 seeded with x (rng.h).
// Integer arithmetic on fixed-width types only: identical on every platform.
uint64_t stream_seed(uint64_t daemon_seed, std::string_view stream_name);

// The generator seed of a stream's evaluation number `evaluation` (0 for its
// first): mix(stream_seed ^ mix(evaluation)), with mix as above. The daemon
// seeds a fresh rng with it for every evaluation, so a result is a function
// of (daemon seed, stream name, evaluation number, windows, settings) alone,
// and a stream keeps no generator between evaluations.
uint64_t evaluation_seed(uint64_t stream_seed, uint64_t evaluation);

// The null value of an interval's quantity, as the alarm's tolerance band is
// centred: 1 for sd-ratio, the reference window's Cpk for cpk (only the recent
// window's Cpk is resampled), 0 for the differences.
double interval_null_value(const interval_result& r);

// Both windows as captured, oldest sample first.
struct evaluation_input {
  std::size_t dimension = 1;
  std::vector<double> reference;  // dimension 1
  std::vector<double> recent;
  Eigen::MatrixXd reference_rows;  // dimension >= 2, one row per sample
  Eigen::MatrixXd recent_rows;
  // Buffers of the other kind are left as they were, so one input can serve
  // streams of either kind without reallocating.
  uint64_t samples_total = 0;  // the monitor's samples_total() at capture
  uint64_t generation = 0;     // the monitor's reference generation at capture
};

// The engines, kept between evaluations so that they stop allocating.
struct evaluation_scratch {
  permutation_engine permutation;
  bootstrap_engine bootstrap;
};

// One test of an evaluation.
struct test_outcome {
  test_kind test = test_kind::ad;
  bool ok = false;
  std::string error;          // the engine's message, when !ok
  permutation_result result;  // when ok
  std::string_view name() const { return test_name(test); }
};

struct evaluation_result {
  std::size_t dimension = 1;
  std::size_t n_reference = 0;  // samples in each window at capture
  std::size_t n_recent = 0;
  uint64_t samples_total = 0;  // copied from the input
  uint64_t generation = 0;
  std::vector<test_outcome> tests;          // in the order run; tests[0] drives the alarm
  bool interval_requested = false;          // settings ask for one and dimension is 1
  std::optional<interval_result> interval;  // when requested and it succeeded
  std::string interval_error;               // when requested and it failed
  // Empty when the driving test succeeded; otherwise why this evaluation
  // counts as quiet ("test ad failed: ...").
  std::string error;

  bool driving_ok() const { return !tests.empty() && tests.front().ok; }
  // The interval as the alarm sees it; nullopt when none was computed.
  std::optional<drift_interval> alarm_interval() const;
};

class stream_monitor {
 public:
  // REQUIRES: settings validated (reference_size, recent_size >= 1);
  // dimension >= 1. `dimension` is the stream's; settings.dimension is not
  // consulted (0 there lets the daemon take it from the stream's first record).
  // Allocates both windows. The first form keeps its own copy of the
  // settings; the second shares them (a daemon with many streams of one
  // group keeps one copy for all; the monitor keeps them alive).
  stream_monitor(const monitor_settings& settings, std::size_t dimension);
  // REQUIRES: settings non-null.
  stream_monitor(std::shared_ptr<const monitor_settings> settings, std::size_t dimension);

  // One sample of dimension() values. O(dimension), no allocation. A sample
  // of the wrong size or with a non-finite value is rejected with an error
  // and changes nothing but rejected_total().
  expected<bool> push(std::span<const double> values);

  // policy file only: the reference samples, oldest first. Univariate:
  // values are the samples. Dimension d >= 2: values holds whole rows,
  // row-major (values.size() a multiple of d). Between 2 and reference_size
  // samples, all finite; the reference capacity becomes their count.
  // Replaces any earlier file reference; the recent window is kept.
  // Allocates (start-up call).
  expected<bool> set_reference(std::span<const double> values);
  // As above, one row per sample. REQUIRES nothing of rows.cols(): a
  // mismatch is an error.
  expected<bool> set_reference(const Eigen::MatrixXd& rows);

  bool ready() const { return reference_full() && recent_full(); }
  bool due_by_count() const {
    return ready() && settings_->every_samples > 0 &&
           since_evaluation_ >= settings_->every_samples;
  }

  // Prefetch hints for push() (a daemon ingesting many streams asks a few
  // records ahead, so that the cache misses overlap). prefetch_state()
  // touches nothing: it only names the monitor's own fields push() reads.
  // prefetch_window() reads those fields (so call it after prefetch_state()
  // has had time) and names the window slot the next sample goes to. Neither
  // changes anything or is needed for correctness.
  void prefetch_state() const;
  void prefetch_window() const;

  // Copies both windows into `in` (see evaluation_input).
  void capture(evaluation_input& in) const;
  // See the header comment. REQUIRES: s validated.
  static evaluation_result evaluate(const evaluation_input& in, const monitor_settings& s,
                                    evaluation_scratch& scratch, rng& gen);
  // Feeds r to the alarm (see the header comment); returns the alarm event it
  // caused. `time` is Unix seconds. The since-evaluation count becomes the
  // number of samples pushed after r was captured.
  std::optional<alarm_event> record(const evaluation_result& r, double time);
  // The same, moving r into last_result() instead of copying it.
  std::optional<alarm_event> record(evaluation_result&& r, double time);

  // Empties the windows as the policy says (header comment), clears an
  // active alarm with cause rebaseline and returns that event, if any.
  std::optional<alarm_event> rebaseline(double time);

  // Replaces the settings (a configuration reload; see "Reload" in the
  // header comment). Returns the alarm event it caused, if any (a changed
  // reference policy clears an active alarm). REQUIRES: s validated.
  std::optional<alarm_event> apply_settings(const monitor_settings& s, double time);
  // The same, sharing s. REQUIRES: s non-null.
  std::optional<alarm_event> apply_settings(std::shared_ptr<const monitor_settings> s,
                                            double time);

  const monitor_settings& settings() const { return *settings_; }
  std::size_t dimension() const { return dim_; }
  const alarm_state& alarm() const { return alarm_; }
  // The last recorded result; null before the first record() (and after a
  // restore from a snapshot, which does not keep it). Valid until the next
  // record() or restore.
  const evaluation_result* last_result() const { return last_.get(); }

  uint64_t samples_total() const { return samples_total_; }
  uint64_t samples_since_evaluation() const { return since_evaluation_; }
  uint64_t rejected_total() const { return rejected_total_; }
  uint64_t evaluations_total() const { return evaluations_total_; }
  // Recorded evaluations whose driving test failed (counted as quiet).
  uint64_t failed_evaluations_total() const { return failed_total_; }
  uint64_t stale_results_total() const { return stale_total_; }
  uint64_t rebaselines_total() const { return rebaselines_total_; }
  // Bumped by rebaseline() and set_reference().
  uint64_t generation() const { return generation_; }

  std::size_t reference_fill() const;
  std::size_t recent_fill() const;
  std::size_t reference_capacity() const;
  std::size_t recent_capacity() const;
  // policy file: true once set_reference() succeeded.
  bool has_reference() const { return reference_fill() > 0; }

 private:
  // Whether r is current; when it is, feeds it to the alarm and updates the
  // counters (but not last_).
  bool accept(const evaluation_result& r, double time, std::optional<alarm_event>& event,
              std::string& error);
  bool reference_full() const;
  bool recent_full() const;
  friend struct state_codec_access;  // core/state_codec.cc: snapshots

  std::shared_ptr<const monitor_settings> settings_;  // never null
  std::size_t dim_;
  // The windows, in the form of the stream's dimension: only one pair is
  // ever held (dimension 1: sample_windows; >= 2: row_windows).
  struct univariate_windows {
    sample_window reference, recent;
  };
  struct multivariate_windows {
    row_window reference, recent;
  };
  using window_pair = std::variant<univariate_windows, multivariate_windows>;
  window_pair windows_;
  // The pair of the stream's kind. REQUIRES: dim_ == 1 for the first four,
  // dim_ >= 2 for the rest.
  sample_window& ref_1() { return std::get_if<univariate_windows>(&windows_)->reference; }
  sample_window& rec_1() { return std::get_if<univariate_windows>(&windows_)->recent; }
  const sample_window& ref_1() const {
    return std::get_if<univariate_windows>(&windows_)->reference;
  }
  const sample_window& rec_1() const { return std::get_if<univariate_windows>(&windows_)->recent; }
  row_window& ref_n() { return std::get_if<multivariate_windows>(&windows_)->reference; }
  row_window& rec_n() { return std::get_if<multivariate_windows>(&windows_)->recent; }
  const row_window& ref_n() const {
    return std::get_if<multivariate_windows>(&windows_)->reference;
  }
  const row_window& rec_n() const {
    return std::get_if<multivariate_windows>(&windows_)->recent;
  }
  // Both windows, empty, at the capacities of s, in the form of `dim`.
  static window_pair new_windows(const monitor_settings& s, std::size_t dim);
  alarm_state alarm_;
  // On the heap, so that a stream never evaluated (or between restarts)
  // carries a pointer, not a whole result.
  std::unique_ptr<evaluation_result> last_;
  uint64_t samples_total_ = 0;
  uint64_t since_evaluation_ = 0;
  uint64_t rejected_total_ = 0;
  uint64_t evaluations_total_ = 0;
  uint64_t failed_total_ = 0;
  uint64_t stale_total_ = 0;
  uint64_t rebaselines_total_ = 0;
  uint64_t generation_ = 0;
};

}  // namespace plumbline
