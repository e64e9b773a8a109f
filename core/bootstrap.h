// bootstrap.h: bootstrap drift intervals between a reference and a recent window.
//
// Purpose. A test says whether a stream moved; a drift interval says how far,
// in the measurement's own units, with an interval a dashboard can draw as a
// band and an engineer can hold against a tolerance.
//
// Quantities (recent against reference; x = reference, y = recent):
//   mean-diff      mean(y) - mean(x).
//   median-diff    median(y) - median(x).
//   quantile-diff  Q_y(q) - Q_x(q), with Q the sample quantile by linear
//                  interpolation between order statistics (Hyndman & Fan
//                  1996, definition 7; NumPy's default): h = (n - 1) q,
//                  Q(q) = x_(floor h) + (h - floor h)(x_(floor h + 1) - x_(floor h)),
//                  order statistics 0-based. median-diff is q = 0.5.
//   sd-ratio       sd(y) / sd(x), standard deviations with divisor n - 1. When
//                  sd(x) = 0 the ratio is undefined: it is reported as
//                  `ratio_cap` (or 1 when sd(y) = 0 too) and flagged degenerate.
//   cpk            the recent window's process capability index
//                  Cpk = min(USL - mean, mean - LSL) / (3 sd) (one-sided with one
//                  limit); the reference's Cpk is reported beside it. Only the
//                  recent window is resampled. Capped at +-`ratio_cap` when
//                  sd = 0 (a constant window inside the limits).
//
// Methods. Each window is resampled within itself (a stratified two-sample
// bootstrap), B times; for each resample the quantity is recomputed.
//   percentile  [t*_(a), t*_(1-a)], a = (1 - level) / 2, t* quantiles by the
//               same linear rule as above.
//   basic       [2 t - t*_(1-a), 2 t - t*_(a)].
//   bca         Efron (1987): percentiles at Phi(z0 + (z0 + z)/(1 - A(z0 + z)))
//               for z = z_a, z_(1-a); z0 = Phi^-1((#{t* < t} + #{t* <= t}) / 2B);
//               the acceleration A from a jackknife over each resampled window
//               (Efron & Tibshirani 1993, eq. 15.36 with the sum over samples):
//               A = sum U^3 / n_j^3 / (6 (sum U^2 / n_j^2)^(3/2)), U = (n_j - 1)(mean
//               of jackknife values - jackknife value). Where z0 is infinite
//               or A is undefined, the interval falls back to percentile and
//               `method_used` and `note` say so.
// Dependence. block_length 1 resamples values independently; L >= 2 resamples
// blocks of L consecutive values, either circular blocks (Politis & Romano
// 1992; blocks wrap around the window's end) or the stationary bootstrap
// (Politis & Romano 1994; geometric block lengths with mean L); 0 chooses
// automatically: independent resampling unless either window's lag-1
// autocorrelation exceeds 2 standard errors, else the Politis–White length
// (dependence.h) of the chosen scheme, the larger of the two windows'. With
// blocks the jackknife for A deletes one block of L at a time.
//
// Degenerate data never gives NaN: when every resample gives the same value
// (a stuck sensor) the interval is [estimate, estimate] and `degenerate` is
// set.
//
// Thread-safety. A `bootstrap_engine` is not thread-safe; use one per thread.
// It keeps its buffers between runs; nothing is allocated per resample.
#pragma once

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "core/dependence.h"
#include "core/rng.h"
#include "core/status.h"

namespace plumbline {

enum class drift_quantity { mean_diff, median_diff, quantile_diff, sd_ratio, cpk };
enum class interval_method { percentile, basic, bca };
enum class block_scheme { circular, stationary };

// "mean-diff", "median-diff", "quantile-diff", "sd-ratio", "cpk".
std::string_view quantity_name(drift_quantity q);
// "percentile", "basic", "bca".
std::string_view method_name(interval_method m);
// "circular", "stationary".
std::string_view scheme_name(block_scheme s);

inline constexpr double ratio_cap = 1e6;
inline constexpr uint64_t max_bootstrap_resamples = 10'000'000;
inline constexpr std::size_t max_bootstrap_window = 1u << 24;

struct interval_options {
  drift_quantity quantity = drift_quantity::mean_diff;
  double quantile = 0.5;                // quantile-diff: 0 < q < 1
  std::optional<double> spec_lower;     // cpk: at least one limit
  std::optional<double> spec_upper;
  interval_method method = interval_method::bca;
  double level = 0.95;                  // 0 < level < 1
  uint64_t resamples = 9999;            // B, 1 .. max_bootstrap_resamples
  uint32_t block_length = 0;            // 0 automatic, 1 independent, L >= 2 blocks
  block_scheme scheme = block_scheme::circular;
};

struct interval_result {
  drift_quantity quantity = drift_quantity::mean_diff;
  double quantile = 0.5;
  interval_method method = interval_method::bca;       // as requested
  interval_method method_used = interval_method::bca;  // percentile after a fallback
  std::string note;            // why a fallback or a degenerate result happened
  double level = 0.95;
  double estimate = 0;
  double lower = 0;
  double upper = 0;
  double standard_error = 0;   // standard deviation of the B replicates
  double reference_value = 0;  // the window's part: mean, quantile, sd or Cpk
  double recent_value = 0;
  uint64_t resamples = 0;
  uint32_t block_length = 1;   // 1 for independent resampling
  block_scheme scheme = block_scheme::circular;
  bool degenerate = false;
  double bias_correction = 0;  // z0 (bca)
  double acceleration = 0;     // A (bca)
  dependence_summary reference_dependence;
  dependence_summary recent_dependence;
  std::size_t n_reference = 0;
  std::size_t n_recent = 0;
};

// One window's (or one resample's) summary: what the quantities are made of.
struct window_summary {
  double mean = 0, sd = 0, quantile = 0;
};

class bootstrap_engine {
 public:
  // Windows in time order, oldest first (order matters for blocks only).
  expected<interval_result> run(std::span<const double> reference,
                                std::span<const double> recent, const interval_options& options,
                                rng& gen);

 private:
  struct window_state {
    std::vector<double> centered;  // x - center, time order
    std::vector<double> sorted;    // ascending
    std::vector<uint32_t> rank;    // rank[t] = position of x_t in sorted
    std::vector<double> prefix;    // circular prefix sums of centered, 2n + 1
    std::vector<double> prefix_sq;
    std::vector<uint32_t> counts;  // per sorted position, for quantiles
    double center = 0;
    std::size_t n = 0;
  };
  void prepare(window_state& w, std::span<const double> x);
  window_summary resample(window_state& w, const interval_options& o, uint32_t block, rng& gen);
  std::vector<double> jackknife(const window_state& w, const interval_options& o,
                                uint32_t block, const window_summary& other, bool is_recent);

  window_state ref_, rec_;
  std::vector<uint32_t> draws_;
  std::vector<double> replicates_;
};

// The quantity from the two windows' summaries (also used for jackknife
// values): exposed for tests.
double sample_quantile(std::span<const double> sorted, double q);

}  // namespace plumbline
