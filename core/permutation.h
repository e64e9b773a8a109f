// permutation.h: two-sample permutation tests.
//
// Purpose. Decide whether the recent sample is drawn from the same
// distribution as the reference sample, without a distributional model. Under
// H0 every split of the pooled data into groups of sizes n and m is equally
// likely; the p-value is the share of splits whose statistic is at least as
// extreme as the observed one.
//
// p-values.
//   exact        all C(N, n) splits enumerated (the observed one among them):
//                p = #{T* >= T_obs} / C(N, n).
//   Monte Carlo  B random splits: p = (1 + #{T* >= T_obs}) / (1 + B)
//                (Phipson & Smyth 2010), never 0.
//   sequential   with stop_after = h > 0, Monte Carlo stops as soon as h
//                exceedances are seen after L resamples, and p = h / L
//                (Besag & Clifford 1991); if B resamples pass first, the Monte
//                Carlo formula applies. `resamples` reports what was used.
// "At least as extreme" is |T*| >= |T_obs| for signed statistics and
// T* >= T_obs otherwise, where a T* within a relative 1e-14 of T_obs counts
// as equal (rounding of theoretically equal values, as SciPy does).
// The Monte Carlo uncertainty of p is reported as a Clopper–Pearson interval
// on the exceedance count at `ci_level`; for exact p-values both ends equal p.
//
// Blocks. Autocorrelated windows break the exchangeability that the test
// rests on, and single-value permutations then reject too often. With a block
// length L, the units permuted are contiguous blocks of L values within each
// window (the oldest n mod L values of a window are left out), so short-range
// dependence stays inside the units.
//
// Edge cases. Fewer than 2 values (or blocks) on a side is an error naming
// the side. A pooled sample that is all one value gives p = 1 and
// `constant_data`.
//
// Thread-safety. A `permutation_engine` is not thread-safe; use one per
// thread. It keeps its buffers between runs, so a long-lived engine allocates
// only when a run is larger than any before it, and never inside the
// resampling loop.
#pragma once

#include <Eigen/Core>
#include <cstdint>
#include <span>
#include <vector>

#include "core/rng.h"
#include "core/statistic.h"
#include "core/status.h"

namespace plumbline {

enum class exact_mode { automatic, always, never };

struct permutation_options {
  test_kind test = test_kind::ad;
  uint64_t resamples = 9999;        // B for Monte Carlo; 1 .. 100,000,000
  exact_mode exact = exact_mode::automatic;
  uint64_t exact_limit = 100000;    // enumerate when C(N, n) <= this (automatic)
  uint64_t stop_after = 0;          // h for sequential stopping; 0 = off
  double ci_level = 0.99;           // level of the p-value's interval
  // Blocks for autocorrelated windows: 1 permutes single values; L >= 2
  // permutes contiguous blocks of L values (each window keeps its newest
  // multiple of L values, in time order); 0 chooses automatically: 1 unless
  // either window's lag-1 autocorrelation exceeds 2 standard errors, else the
  // Politis–White circular-block length (dependence.h), the larger of the two.
  uint32_t block_length = 1;
};

// Upper bounds accepted by the engine, whatever the options say.
inline constexpr uint64_t max_resamples = 100'000'000;
inline constexpr uint64_t max_exact_splits = 100'000'000;
// The energy statistic keeps an N x N distance matrix.
inline constexpr std::size_t max_energy_pooled = 4096;

struct permutation_result {
  test_kind test = test_kind::ad;
  double statistic = 0;     // observed T (for ad: A2akN)
  double p_value = 1;
  double p_low = 1;         // Clopper–Pearson interval (exact: = p_value)
  double p_high = 1;
  uint64_t resamples = 0;   // splits evaluated (exact: C(N, n))
  uint64_t exceedances = 0; // splits with T* at least as extreme
  bool exact = false;
  bool stopped_early = false;  // sequential stopping ended the run
  bool constant_data = false;  // the pooled sample is all one value
  std::size_t n_reference = 0;  // values used (block mode may leave out the oldest few)
  std::size_t n_recent = 0;
  uint32_t block_length = 1;    // 1 when single values were permuted
};

// The number of splits C(n + m, n), saturating at UINT64_MAX.
uint64_t split_count(std::size_t n, std::size_t m);

class permutation_engine {
 public:
  // Univariate samples. Energy on univariate data treats values as 1-D rows.
  expected<permutation_result> run(std::span<const double> reference,
                                   std::span<const double> recent,
                                   const permutation_options& options, rng& gen);

  // Multivariate rows (one sample per row). REQUIRES: options.test == energy,
  // or both matrices have one column.
  expected<permutation_result> run(const Eigen::MatrixXd& reference,
                                   const Eigen::MatrixXd& recent,
                                   const permutation_options& options, rng& gen);

 private:
  // Work buffers, reused across runs (see permutation.cc).
  std::vector<double> sorted_;       // pooled values, ascending
  std::vector<double> values_;       // pooled centered values, shuffled in place
  std::vector<double> pooled_;       // pooled values in pooled order / scratch
  std::vector<uint32_t> positions_;  // positions into sorted_, shuffled in place
  std::vector<uint32_t> subset_;     // exact enumeration: current combination
  std::vector<uint32_t> draws_;      // one resample's bounded draws
  std::vector<uint32_t> units_;      // block mode: block ids, shuffled in place
  std::vector<uint32_t> members_;    // block mode: kernel position of each pooled value
  std::vector<uint32_t> expanded_;   // block mode: positions of the drawn blocks
  std::vector<uint32_t> rank_of_;    // sorted position of each pooled value
  std::vector<double> scratch_;      // exact mode: the drawn group's values
  std::vector<uint8_t> mark_;        // 1 where a sorted position is in the drawn group
  std::vector<uint32_t> group_end_;  // tie groups: one past the last position
  std::vector<double> midrank_;      // per tie group: 1-based midrank
  std::vector<double> ad_coef_;      // per tie group: AD weight
  std::vector<double> ad_b_;         // per tie group: B_j (Scholz & Stephens)
  Eigen::MatrixXd dist_;             // energy: pooled distance matrix
  Eigen::VectorXd dist_rowsum_;
};

// Convenience: one run with a temporary engine.
expected<permutation_result> permutation_test(std::span<const double> reference,
                                              std::span<const double> recent,
                                              const permutation_options& options, rng& gen);

}  // namespace plumbline
