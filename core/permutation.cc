// permutation.cc: the permutation-test driver and its resampling kernels.
//
// Design note.
// * Layout. The pooled sample is copied once into the engine's buffers. Sum
//   statistics (mean-diff, welch) work on the pooled values centered on their
//   mean (the pooled mean does not change under permutation, and centering
//   keeps sums of squares accurate for data far from zero). Rank and ECDF
//   statistics (median-diff, ks, cvm, ad) work on positions in ONE ascending
//   sort of the pooled values, made before resampling; ties are whole tie
//   groups of that sort, so they are handled exactly (midranks for cvm and
//   ad, ECDF steps only at group ends for ks).
// * Drawing. Only the smaller group (size k) is drawn, by a partial
//   Fisher–Yates shuffle of the pooled buffer in place: k bounded draws
//   (Lemire) and k swaps. The buffer is never reset: a partial shuffle of any
//   arrangement yields a uniformly random k-subset, so one buffer serves all
//   B resamples. Nothing is allocated in the loop. The k draws of a resample
//   come in one rng::bounded_descending call (the numbers of k bounded()
//   calls, made a block at a time). For mean-diff and welch the swaps and the
//   sums over the drawn group are one pass, four positions at a time
//   (shuffle_sums), with the same results bit for bit as the swaps followed
//   by sums().
// * Per-resample work: O(k) for sum statistics; O(k) marks plus one O(N)
//   scan of the sorted positions for rank statistics; O(k^2) lookups in a
//   precomputed distance matrix for energy.
// * Decimal data. Measurements are decimal (125.4 g, 125.6 g), their binary
//   doubles are not, so splits whose sums are equal for the decimal values
//   differ by rounding of the order of eps times the values' magnitude,
//   which can be far more than 1e-14 |T| when T is small. mean-diff and welch
//   therefore get an absolute allowance derived from that bound (see run()),
//   and a group variance within rounding of 0 counts as exactly 0.
// * Exact comparisons. ks and cvm are compared on integer-valued forms (the
//   largest |c_d k_o - c_o k_d| over tie groups, and U), so ties between
//   splits are exact. For the other statistics a T* within a relative 1e-14
//   of T_obs counts as an exceedance (SciPy's permutation_test uses the same
//   relative 1e-14, plus an absolute floor of 1e-14 that we leave out because
//   it depends on the measurement's units). The energy statistic is a
//   difference of sums of k^2 distances, so its rounding error scales with
//   the mean distance rather than with the statistic: it gets an absolute
//   allowance of 1e-13 (k_d k_o / N) (mean pooled distance) as well, which
//   keeps mirror-image splits (equal in exact arithmetic when n = m) equal.
// * p-values: exact share of all C(N, k) splits; Phipson & Smyth (2010)
//   (1 + c) / (1 + B) for Monte Carlo; Besag & Clifford (1991) h / L for
//   sequential stopping; Clopper–Pearson on (c, L) for the uncertainty.
#include "core/permutation.h"

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <numeric>
#include <string>

#include "core/dependence.h"
#include "core/special.h"

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

namespace plumbline {

namespace {

constexpr double tie_tolerance = 1e-14;

// `slack` is an absolute allowance for statistics whose rounding error is
// not proportional to their value (energy: a difference of large sums).
inline bool at_least(double t, double observed, double slack = 0) {
  return t >= observed || t >= observed - tie_tolerance * std::fabs(observed) - slack;
}

std::string count_text(std::size_t n) {
  return std::to_string(n) + (n == 1 ? " value" : " values");
}

// One resample's partial Fisher–Yates shuffle of buf[0..n): k swaps with
// positions drawn in bulk (rng::bounded_descending gives the same numbers as
// k bounded() calls). Afterwards buf[0..k) is a uniform random k-subset.
template <typename T>
inline void partial_shuffle(T* buf, uint32_t* draws, uint32_t n, uint32_t k, rng& gen) {
  gen.bounded_descending(draws, n, k);
  for (uint32_t i = 0; i < k; ++i) {
    const uint32_t j = i + draws[i];
    const T t = buf[j];
    buf[j] = buf[i];
    buf[i] = t;
  }
}

// Sum and sum of squares of v[0..k) with four accumulators (a fixed order,
// so results are reproducible; the four chains also hide add latency).
inline void sums(const double* v, uint32_t k, double& s, double& q, bool need_q) {
  double s0 = 0, s1 = 0, s2 = 0, s3 = 0, q0 = 0, q1 = 0, q2 = 0, q3 = 0;
  uint32_t i = 0;
  for (; i + 4 <= k; i += 4) {
    s0 += v[i];
    s1 += v[i + 1];
    s2 += v[i + 2];
    s3 += v[i + 3];
    if (need_q) {
      q0 += v[i] * v[i];
      q1 += v[i + 1] * v[i + 1];
      q2 += v[i + 2] * v[i + 2];
      q3 += v[i + 3] * v[i + 3];
    }
  }
  for (; i < k; ++i) {
    s0 += v[i];
    if (need_q) q0 += v[i] * v[i];
  }
  s = (s0 + s1) + (s2 + s3);
  q = (q0 + q1) + (q2 + q3);
}

// partial_shuffle of doubles fused with sums() of the drawn group: the same
// swaps and the same sums, bit for bit, in one pass. Only the sums are needed,
// and the drawn value of position i is final once step i is done, so each
// group of four steps i..i+3 reads the current values of positions i..i+3
// first, swaps each with its partner j = i + l + d[i + l], writes the four
// drawn values back together and adds them to four lane sums (lane l takes
// the positions i = l mod 4, the last k mod 4 go to lane 0, as in sums()).
// This equals the four swaps in turn when no partner lies inside the group
// (j < i + 4, probability about 10 / (N - i) per group, N the pooled size);
// such a group is done one swap at a time. The plain loop is limited by its two stores per
// element; this one makes 1.25.
template <bool need_q>
void shuffle_sums_body(double* v, const uint32_t* d, uint32_t k, double& s_out, double& q_out) {
  double s0 = 0, s1 = 0, s2 = 0, s3 = 0, q0 = 0, q1 = 0, q2 = 0, q3 = 0;
  double* w = v;
  const uint32_t* dw = d;
  double* const end = v + (k & ~3u);
#if defined(__SSE2__)
  const __m128i limit = _mm_setr_epi32(4, 3, 2, 1);  // d < 2^31 (k <= n < 2^31)
#endif
  for (; w != end; w += 4, dw += 4) {
#if defined(__SSE2__)
    const __m128i dv = _mm_loadu_si128(reinterpret_cast<const __m128i*>(dw));
    const bool inside = _mm_movemask_epi8(_mm_cmpgt_epi32(limit, dv)) != 0;
#else
    const bool inside = (dw[0] < 4) | (dw[1] < 3) | (dw[2] < 2) | (dw[3] < 1);
#endif
    double g0, g1, g2, g3;
    if (inside) [[unlikely]] {
      for (std::size_t l = 0; l < 4; ++l) {
        const std::size_t j = l + dw[l];
        const double t = w[j];
        w[j] = w[l];
        w[l] = t;
      }
      g0 = w[0];
      g1 = w[1];
      g2 = w[2];
      g3 = w[3];
    } else {
      const std::size_t j0 = dw[0], j1 = 1 + std::size_t{dw[1]}, j2 = 2 + std::size_t{dw[2]},
                        j3 = 3 + std::size_t{dw[3]};
      const double c0 = w[0], c1 = w[1], c2 = w[2], c3 = w[3];
      g0 = w[j0];
      w[j0] = c0;
      g1 = w[j1];
      w[j1] = c1;
      g2 = w[j2];
      w[j2] = c2;
      g3 = w[j3];
      w[j3] = c3;
      w[0] = g0;
      w[1] = g1;
      w[2] = g2;
      w[3] = g3;
    }
    s0 += g0;
    s1 += g1;
    s2 += g2;
    s3 += g3;
    if constexpr (need_q) {
      q0 += g0 * g0;
      q1 += g1 * g1;
      q2 += g2 * g2;
      q3 += g3 * g3;
    }
  }
  for (uint32_t i = k & ~3u; i < k; ++i) {
    const uint32_t j = i + d[i];
    const double t = v[j];
    v[j] = v[i];
    v[i] = t;
    s0 += t;
    if constexpr (need_q) q0 += t * t;
  }
  s_out = (s0 + s1) + (s2 + s3);
  q_out = (q0 + q1) + (q2 + q3);
}

inline void shuffle_sums(double* v, const uint32_t* d, uint32_t k, bool need_q, double& s,
                         double& q) {
  if (need_q)
    shuffle_sums_body<true>(v, d, k, s, q);
  else
    shuffle_sums_body<false>(v, d, k, s, q);
}

// Next k-combination of {0..n-1} in lexicographic order; false after the last.
bool next_combination(std::vector<uint32_t>& c, uint32_t n) {
  const uint32_t k = static_cast<uint32_t>(c.size());
  uint32_t i = k;
  while (i > 0 && c[i - 1] == n - k + i - 1) --i;
  if (i == 0) return false;
  ++c[i - 1];
  for (uint32_t j = i; j < k; ++j) c[j] = c[j - 1] + 1;
  return true;
}

// Counting: apply `eval` to each split and count those at least as extreme.
struct tally {
  uint64_t evaluated = 0;
  uint64_t exceed = 0;
  bool stopped = false;
};

}  // namespace

uint64_t split_count(std::size_t n, std::size_t m) {
  const std::size_t k = std::min(n, m);
  const std::size_t total = n + m;
  __extension__ typedef unsigned __int128 u128;
  u128 c = 1;
  for (std::size_t i = 1; i <= k; ++i) {
    c = c * (total - k + i) / i;  // exact: c * (total-k+i) is divisible by i
    if (c > UINT64_MAX) return UINT64_MAX;
  }
  return static_cast<uint64_t>(c);
}

namespace {

// The common driver. `Kernel` provides:
//   double observed();                   statistic for the actual split
//   double exact(const uint32_t* c, k);  statistic for the split whose drawn
//                                        group is the combination c
//   double draw(rng&);                   statistic for one random split
// The values returned are in "comparison form": larger means more extreme.
template <typename Kernel>
tally drive(Kernel& kernel, bool exact, uint32_t n_total, uint32_t k, uint64_t resamples,
            uint64_t stop_after, std::vector<uint32_t>& subset, rng& gen, double observed) {
  tally t;
  if (exact) {
    subset.resize(k);
    std::iota(subset.begin(), subset.end(), 0u);
    do {
      ++t.evaluated;
      if (at_least(kernel.exact(subset.data(), k), observed, kernel.slack)) ++t.exceed;
    } while (next_combination(subset, n_total));
    return t;
  }
  for (uint64_t b = 0; b < resamples; ++b) {
    ++t.evaluated;
    if (at_least(kernel.draw(gen), observed, kernel.slack)) {
      ++t.exceed;
      if (stop_after != 0 && t.exceed >= stop_after) {
        t.stopped = true;
        break;
      }
    }
  }
  return t;
}

// Block mode: the units are `blocks` blocks of `len` pooled values each;
// members[b * len + t] is the kernel position of value t of block b. Each
// split draws kb blocks and hands the kernel their expanded positions.
struct block_plan {
  const uint32_t* members;
  uint32_t* units;     // block ids, shuffled in place
  uint32_t* draws;
  uint32_t* expanded;  // kb * len positions
  uint32_t blocks, kb, len;
};

template <typename Kernel>
tally drive_blocks(Kernel& kernel, bool exact, const block_plan& p, uint64_t resamples,
                   uint64_t stop_after, std::vector<uint32_t>& subset, rng& gen,
                   double observed) {
  tally t;
  const uint32_t k = p.kb * p.len;
  auto expand = [&](const uint32_t* ids) {
    for (uint32_t b = 0; b < p.kb; ++b)
      for (uint32_t i = 0; i < p.len; ++i)
        p.expanded[b * p.len + i] = p.members[ids[b] * p.len + i];
  };
  if (exact) {
    subset.resize(p.kb);
    std::iota(subset.begin(), subset.end(), 0u);
    do {
      ++t.evaluated;
      expand(subset.data());
      if (at_least(kernel.exact(p.expanded, k), observed, kernel.slack)) ++t.exceed;
    } while (next_combination(subset, p.blocks));
    return t;
  }
  for (uint64_t b = 0; b < resamples; ++b) {
    ++t.evaluated;
    partial_shuffle(p.units, p.draws, p.blocks, p.kb, gen);
    expand(p.units);
    if (at_least(kernel.exact(p.expanded, k), observed, kernel.slack)) {
      ++t.exceed;
      if (stop_after != 0 && t.exceed >= stop_after) {
        t.stopped = true;
        break;
      }
    }
  }
  return t;
}

// mean-diff and welch: sums over the drawn group of centered values.
struct sum_kernel {
  test_kind kind;
  double* values;  // centered pooled values, shuffled in place by draw()
  uint32_t* draws;
  const double* fixed;  // centered pooled values in pooled order (exact mode)
  double* scratch;      // k values (exact mode)
  uint32_t n_total, k;
  double total, total_sq;
  bool drawn_is_recent;
  double slack = 0;
  double var_floor = 0;  // a variance at or below this is rounding: exactly 0

  double variance(double s, double q, double count) const {
    const double v = (q - s * s / count) / (count - 1);
    return v <= var_floor ? 0.0 : v;
  }
  double standard_error(double s, double q) const {
    const double kd = k, ko = n_total - k;
    return std::sqrt(variance(s, q, kd) / kd + variance(total - s, total_sq - q, ko) / ko);
  }
  double finish(double s, double q) const {
    const double kd = k, ko = n_total - k;
    const double mean_d = s / kd, mean_o = (total - s) / ko;
    double diff = drawn_is_recent ? mean_d - mean_o : mean_o - mean_d;
    if (kind == test_kind::mean_diff) return std::fabs(diff);
    const double se = standard_error(s, q);
    if (se == 0) return diff == 0 ? 0.0 : DBL_MAX;
    return std::fabs(diff / se);
  }
  double exact(const uint32_t* c, uint32_t kk) const {
    // Gather so that the summation order matches draw()'s.
    for (uint32_t i = 0; i < kk; ++i) scratch[i] = fixed[c[i]];
    double s, q;
    sums(scratch, kk, s, q, kind == test_kind::welch);
    return finish(s, q);
  }
  double draw(rng& gen) {
    gen.bounded_descending(draws, n_total, k);
    double s, q;
    shuffle_sums(values, draws, k, kind == test_kind::welch, s, q);
    return finish(s, q);
  }
};

// median-diff, ks, cvm, ad: marks over positions of the one sorted copy.
struct rank_kernel {
  test_kind kind;
  const double* sorted;
  uint8_t* mark;
  uint32_t* positions;  // shuffled in place by draw()
  uint32_t* draws;
  const uint32_t* group_end;
  const double* midrank;
  const double* ad_coef;
  const double* ad_b;
  uint32_t groups, n_total, k;
  double slack = 0;

  double scan() const {
    const uint32_t kd = k, ko = n_total - k;
    switch (kind) {
      case test_kind::ks: {
        // F_d - F_o at a group ending at e equals (c_d N - e k_d) / (k_d k_o).
        const int64_t big_n = n_total, kdi = kd;
        if (groups == n_total) {  // no ties: every position ends a group
          int64_t cd = 0, hi = 0, lo = 0;
          for (uint32_t i = 0; i < n_total; ++i) {
            cd += mark[i];
            const int64_t v = cd * big_n - static_cast<int64_t>(i + 1) * kdi;
            hi = std::max(hi, v);
            lo = std::min(lo, v);
          }
          return static_cast<double>(std::max(hi, -lo));
        }
        int64_t best = 0, cd = 0;
        uint32_t i = 0;
        for (uint32_t g = 0; g < groups; ++g) {
          const uint32_t end = group_end[g];
          for (; i < end; ++i) cd += mark[i];
          const int64_t diff = cd * big_n - static_cast<int64_t>(end) * kdi;
          best = std::max(best, diff < 0 ? -diff : diff);
        }
        return static_cast<double>(best);
      }
      case test_kind::cvm: {
        double ud = 0, uo = 0, id = 0, io = 0;
        uint32_t i = 0;
        for (uint32_t g = 0; g < groups; ++g) {
          const double r = midrank[g];
          for (const uint32_t end = group_end[g]; i < end; ++i) {
            const double d = mark[i];
            id += d;
            io += 1 - d;
            const double e = r - (mark[i] ? id : io);
            ud += d * e * e;
            uo += (1 - d) * e * e;
          }
        }
        return static_cast<double>(kd) * ud + static_cast<double>(ko) * uo;
      }
      case test_kind::ad: {
        const double big_n = n_total;
        double sd = 0, so = 0;
        uint32_t cum_d = 0, i = 0;
        for (uint32_t g = 0; g < groups; ++g) {
          const uint32_t start = i, end = group_end[g];
          uint32_t fd = 0;
          for (; i < end; ++i) fd += mark[i];
          cum_d += fd;
          const uint32_t fo = (end - start) - fd;
          const double mad = cum_d - fd / 2.0;
          const double mao = (end - cum_d) - fo / 2.0;
          const double b = ad_b[g];
          const double nd = big_n * mad - b * kd, no = big_n * mao - b * ko;
          sd += ad_coef[g] * nd * nd;
          so += ad_coef[g] * no * no;
        }
        return (sd / kd + so / ko) * (big_n - 1) / big_n;
      }
      case test_kind::median_diff: {
        // Order statistics (0-based) of each group's median.
        const uint32_t d1 = (kd - 1) / 2, d2 = kd / 2, o1 = (ko - 1) / 2, o2 = ko / 2;
        double vd1 = 0, vd2 = 0, vo1 = 0, vo2 = 0;
        uint32_t cd = 0, co = 0;
        for (uint32_t i = 0; i < n_total && (cd <= d2 || co <= o2); ++i) {
          if (mark[i]) {
            if (cd == d1) vd1 = sorted[i];
            if (cd == d2) vd2 = sorted[i];
            ++cd;
          } else {
            if (co == o1) vo1 = sorted[i];
            if (co == o2) vo2 = sorted[i];
            ++co;
          }
        }
        return std::fabs((vd1 + vd2) / 2 - (vo1 + vo2) / 2);
      }
      default: return 0;
    }
  }
  double exact(const uint32_t* c, uint32_t kk) const {
    for (uint32_t i = 0; i < kk; ++i) mark[c[i]] = 1;
    const double t = scan();
    for (uint32_t i = 0; i < kk; ++i) mark[c[i]] = 0;
    return t;
  }
  double draw(rng& gen) {
    partial_shuffle(positions, draws, n_total, k, gen);
    for (uint32_t i = 0; i < k; ++i) mark[positions[i]] = 1;
    const double t = scan();
    for (uint32_t i = 0; i < k; ++i) mark[positions[i]] = 0;
    return t;
  }
};

// energy: sums of a precomputed distance matrix over the drawn group.
struct energy_kernel {
  const Eigen::MatrixXd* dist;  // symmetric, zero diagonal
  const double* rowsum;
  uint32_t* positions;
  uint32_t* draws;
  uint32_t n_total, k;
  double total;  // sum of all entries
  double slack;  // see the design note

  double finish(const uint32_t* c, uint32_t kk) const {
    double s_dd = 0, r_d = 0;
    for (uint32_t a = 0; a < kk; ++a) {
      const double* col = dist->data() + static_cast<std::ptrdiff_t>(c[a]) * dist->rows();
      r_d += rowsum[c[a]];
      for (uint32_t b = a + 1; b < kk; ++b) s_dd += col[c[b]];
    }
    s_dd *= 2;
    const double s_do = r_d - s_dd;
    const double s_oo = total - s_dd - 2 * s_do;
    const double kd = kk, ko = n_total - kk;
    return kd * ko / n_total * (2 * s_do / (kd * ko) - s_dd / (kd * kd) - s_oo / (ko * ko));
  }
  double exact(const uint32_t* c, uint32_t kk) const { return finish(c, kk); }
  double draw(rng& gen) {
    partial_shuffle(positions, draws, n_total, k, gen);
    return finish(positions, k);
  }
};

expected<bool> check_options(const permutation_options& o) {
  if (o.resamples < 1 || o.resamples > max_resamples)
    return make_error("resamples must be between 1 and " + std::to_string(max_resamples) +
                      ", got " + std::to_string(o.resamples));
  if (!(o.ci_level > 0 && o.ci_level < 1))
    return make_error("the p-value interval level must lie strictly between 0 and 1");
  if (o.exact_limit > max_exact_splits)
    return make_error("the exact-enumeration limit must be at most " +
                      std::to_string(max_exact_splits));
  return true;
}

expected<bool> check_sample(const double* data, std::size_t count, std::size_t rows,
                            const char* side) {
  if (rows < 2)
    return make_error(std::string(side) + " sample has " + count_text(rows) +
                      "; at least 2 are needed");
  if (rows > (1u << 30))
    return make_error(std::string(side) + " sample is too large (more than 2^30 values)");
  for (std::size_t i = 0; i < count; ++i)
    if (!std::isfinite(data[i]))
      return make_error(std::string(side) + " sample holds a value that is NaN or infinite");
  return true;
}

// Fills the result's p-value fields from a tally.
void finish_result(permutation_result& r, const tally& t, bool exact, uint64_t stop_after,
                   double level) {
  r.exact = exact;
  r.resamples = t.evaluated;
  r.exceedances = t.exceed;
  r.stopped_early = t.stopped;
  if (exact) {
    r.p_value = static_cast<double>(t.exceed) / static_cast<double>(t.evaluated);
    r.p_low = r.p_high = r.p_value;
    return;
  }
  if (t.stopped)
    r.p_value = static_cast<double>(stop_after) / static_cast<double>(t.evaluated);
  else
    r.p_value = static_cast<double>(t.exceed + 1) / static_cast<double>(t.evaluated + 1);
  const proportion_interval ci = clopper_pearson(t.exceed, t.evaluated, level);
  r.p_low = std::min(ci.lower, r.p_value);
  r.p_high = std::max(ci.upper, r.p_value);
}

// Decides exact versus Monte Carlo.
expected<bool> choose_exact(const permutation_options& o, std::size_t n, std::size_t m) {
  const uint64_t splits = split_count(n, m);
  switch (o.exact) {
    case exact_mode::never: return false;
    case exact_mode::automatic: return splits <= o.exact_limit;
    case exact_mode::always:
      if (splits > max_exact_splits)
        return make_error("exact enumeration would need " +
                          (splits == UINT64_MAX ? std::string("more than 2^64")
                                                : std::to_string(splits)) +
                          " splits; at most " + std::to_string(max_exact_splits) +
                          " are allowed");
      return true;
  }
  return false;
}

}  // namespace

namespace {

// Resolves options.block_length (0 = automatic) for windows in time order.
uint32_t resolve_block(uint32_t requested, std::span<const double> x, std::span<const double> y) {
  if (requested != 0) return requested;
  const dependence_summary dx = measure_dependence(x), dy = measure_dependence(y);
  if (!dx.dependent && !dy.dependent) return 1;
  const double b = std::ceil(std::max(dx.block_circular, dy.block_circular));
  return b < 2 ? 1 : static_cast<uint32_t>(b);
}

// Block mode keeps each window's newest multiple of L values.
expected<bool> check_blocks(std::size_t n, std::size_t m, uint32_t len) {
  if (len <= 1) return true;
  for (auto [size, side] : {std::pair{n, "reference"}, std::pair{m, "recent"}})
    if (size / len < 2)
      return make_error(std::string(side) + " sample has " + count_text(size) +
                        ": fewer than 2 blocks of " + std::to_string(len));
  return true;
}

}  // namespace

expected<permutation_result> permutation_engine::run(std::span<const double> reference,
                                                     std::span<const double> recent,
                                                     const permutation_options& options,
                                                     rng& gen) {
  if (options.test == test_kind::energy) {
    const Eigen::Map<const Eigen::MatrixXd> x(reference.data(),
                                              static_cast<Eigen::Index>(reference.size()), 1);
    const Eigen::Map<const Eigen::MatrixXd> y(recent.data(),
                                              static_cast<Eigen::Index>(recent.size()), 1);
    return run(Eigen::MatrixXd(x), Eigen::MatrixXd(y), options, gen);
  }
  if (auto ok = check_options(options); !ok) return ok.err();
  if (auto ok = check_sample(reference.data(), reference.size(), reference.size(), "reference");
      !ok)
    return ok.err();
  if (auto ok = check_sample(recent.data(), recent.size(), recent.size(), "recent"); !ok)
    return ok.err();
  const uint32_t len = resolve_block(options.block_length, reference, recent);
  if (auto ok = check_blocks(reference.size(), recent.size(), len); !ok) return ok.err();
  if (len > 1) {
    reference = reference.last(reference.size() - reference.size() % len);
    recent = recent.last(recent.size() - recent.size() % len);
  }
  const std::size_t n = reference.size(), m = recent.size(), big_n = n + m;

  permutation_result r;
  r.test = options.test;
  r.n_reference = n;
  r.n_recent = m;
  r.block_length = len;

  sorted_.assign(reference.begin(), reference.end());
  sorted_.insert(sorted_.end(), recent.begin(), recent.end());
  std::sort(sorted_.begin(), sorted_.end());
  if (sorted_.front() == sorted_.back()) {
    r.constant_data = true;
    return r;  // statistic 0, p = 1, no resamples
  }
  auto exact = choose_exact(options, n / len, m / len);
  if (!exact) return exact.err();
  r.statistic = statistic_value(options.test, reference, recent);

  const bool drawn_is_recent = m <= n;
  const auto drawn = drawn_is_recent ? recent : reference;
  const auto other = drawn_is_recent ? reference : recent;
  const uint32_t k = static_cast<uint32_t>(drawn.size());
  const uint32_t nt = static_cast<uint32_t>(big_n);
  // Pooled order: the drawn group first, so the observed split is 0..k-1.
  pooled_.assign(drawn.begin(), drawn.end());
  pooled_.insert(pooled_.end(), other.begin(), other.end());
  draws_.resize(std::max(k, nt / len));

  // Runs the kernel over single values or blocks; `position` maps a pooled
  // index to the kernel's position space.
  auto run_kernel = [&](auto& kern, auto position) {
    subset_.resize(k);
    for (uint32_t i = 0; i < k; ++i) subset_[i] = position(i);
    const double observed = kern.exact(subset_.data(), k);
    if (len <= 1)
      return drive(kern, exact.value(), nt, k, options.resamples, options.stop_after, subset_,
                   gen, observed);
    members_.resize(nt);
    for (uint32_t i = 0; i < nt; ++i) members_[i] = position(i);
    units_.resize(nt / len);
    std::iota(units_.begin(), units_.end(), 0u);
    expanded_.resize(k);
    const block_plan plan{members_.data(), units_.data(), draws_.data(), expanded_.data(),
                          nt / len, k / len, len};
    return drive_blocks(kern, exact.value(), plan, options.resamples, options.stop_after,
                        subset_, gen, observed);
  };

  tally t;
  if (options.test == test_kind::mean_diff || options.test == test_kind::welch) {
    double c = 0;
    for (double v : pooled_) c += v;
    c /= static_cast<double>(big_n);
    double total = 0, total_sq = 0;
    for (double& v : pooled_) {
      v -= c;
      total += v;
      total_sq += v * v;
    }
    values_.assign(pooled_.begin(), pooled_.end());  // shuffled in place by draw()
    scratch_.resize(k);
    sum_kernel kern{options.test, values_.data(), draws_.data(), pooled_.data(),
                    scratch_.data(), nt, k, total, total_sq, drawn_is_recent};
    // Rounding allowances (see the design note). Each centered value carries
    // an error of at most eps X / 2, X the largest |value| before centering,
    // so a mean difference is off by at most eps X, and two splits that are
    // equal for the decimal data by 2 eps X; a variance is off by about
    // 2 eps X V, V the largest |centered value|.
    double big_x = 0, big_v = 0;
    for (double v : reference) big_x = std::max(big_x, std::fabs(v));
    for (double v : recent) big_x = std::max(big_x, std::fabs(v));
    for (double v : pooled_) big_v = std::max(big_v, std::fabs(v));
    const double eps = DBL_EPSILON;
    kern.var_floor = 8 * eps * big_x * big_v;
    const double mean_slack = 8 * eps * big_x;
    if (options.test == test_kind::mean_diff) {
      kern.slack = mean_slack;
    } else {
      // |T| = |d| / se: the error is about delta_d / se + |T| delta_se / se.
      subset_.resize(k);
      std::iota(subset_.begin(), subset_.end(), 0u);
      double s0 = 0, q0 = 0;
      for (uint32_t i = 0; i < k; ++i) {
        s0 += pooled_[i];
        q0 += pooled_[i] * pooled_[i];
      }
      const double se = kern.standard_error(s0, q0);
      if (se > 0) {
        const double t_obs = kern.exact(subset_.data(), k);
        const double dvar = 2 * eps * big_x * big_v * (1.0 / k + 1.0 / (nt - k));
        kern.slack = 4 * (mean_slack / se + (t_obs < DBL_MAX ? t_obs : 0) * dvar / (se * se));
      }
    }
    t = run_kernel(kern, [](uint32_t i) { return i; });
  } else {
    // Tie groups of the sorted pooled values.
    group_end_.clear();
    for (uint32_t i = 1; i <= nt; ++i)
      if (i == nt || sorted_[i] != sorted_[i - 1]) group_end_.push_back(i);
    const uint32_t groups = static_cast<uint32_t>(group_end_.size());
    midrank_.resize(groups);
    ad_coef_.resize(groups);
    ad_b_.resize(groups);
    for (uint32_t g = 0, start = 0; g < groups; start = group_end_[g++]) {
      const double left = start, lj = group_end_[g] - start, bn = nt;
      midrank_[g] = (left + 1 + group_end_[g]) / 2;
      ad_b_[g] = left + lj / 2;
      ad_coef_[g] = lj / bn / (ad_b_[g] * (bn - ad_b_[g]) - bn * lj / 4);
    }
    // Sorted position of each pooled value: a stable argsort, so tied values
    // take distinct positions (which one is immaterial: every scan depends
    // only on counts per tie group).
    positions_.resize(nt);
    std::iota(positions_.begin(), positions_.end(), 0u);
    std::stable_sort(positions_.begin(), positions_.end(),
                     [&](uint32_t a, uint32_t b) { return pooled_[a] < pooled_[b]; });
    rank_of_.resize(nt);
    for (uint32_t s = 0; s < nt; ++s) rank_of_[positions_[s]] = s;
    std::iota(positions_.begin(), positions_.end(), 0u);  // the shuffle buffer
    mark_.assign(nt, 0);
    rank_kernel kern{options.test, sorted_.data(), mark_.data(), positions_.data(),
                     draws_.data(), group_end_.data(), midrank_.data(), ad_coef_.data(),
                     ad_b_.data(), groups, nt, k};
    t = run_kernel(kern, [&](uint32_t i) { return rank_of_[i]; });
  }
  finish_result(r, t, exact.value(), options.stop_after, options.ci_level);
  return r;
}

expected<permutation_result> permutation_engine::run(const Eigen::MatrixXd& reference,
                                                     const Eigen::MatrixXd& recent,
                                                     const permutation_options& options,
                                                     rng& gen) {
  if (options.test != test_kind::energy) {
    if (reference.cols() != 1 || recent.cols() != 1)
      return make_error("test " + std::string(test_name(options.test)) +
                        " takes one value per sample; use energy for rows of several values");
    return run(std::span<const double>(reference.data(), static_cast<std::size_t>(reference.rows())),
               std::span<const double>(recent.data(), static_cast<std::size_t>(recent.rows())),
               options, gen);
  }
  if (auto ok = check_options(options); !ok) return ok.err();
  if (reference.cols() != recent.cols())
    return make_error("reference rows have " + std::to_string(reference.cols()) +
                      " values but recent rows have " + std::to_string(recent.cols()));
  if (reference.cols() < 1) return make_error("rows must hold at least one value");
  if (auto ok = check_sample(reference.data(), static_cast<std::size_t>(reference.size()),
                             static_cast<std::size_t>(reference.rows()), "reference");
      !ok)
    return ok.err();
  if (auto ok = check_sample(recent.data(), static_cast<std::size_t>(recent.size()),
                             static_cast<std::size_t>(recent.rows()), "recent");
      !ok)
    return ok.err();
  // Block length: automatic mode takes the largest over the columns.
  uint32_t len = options.block_length;
  if (len == 0) {
    len = 1;
    for (Eigen::Index c = 0; c < reference.cols(); ++c) {
      const Eigen::VectorXd xc = reference.col(c), yc = recent.col(c);
      len = std::max(len, resolve_block(0, std::span<const double>(xc.data(), xc.size()),
                                        std::span<const double>(yc.data(), yc.size())));
    }
  }
  if (auto ok = check_blocks(static_cast<std::size_t>(reference.rows()),
                             static_cast<std::size_t>(recent.rows()), len);
      !ok)
    return ok.err();
  const Eigen::Index keep_x = reference.rows() - reference.rows() % len;
  const Eigen::Index keep_y = recent.rows() - recent.rows() % len;
  const std::size_t n = static_cast<std::size_t>(keep_x);
  const std::size_t m = static_cast<std::size_t>(keep_y);
  const std::size_t big_n = n + m;
  if (big_n > max_energy_pooled)
    return make_error("the energy test takes at most " + std::to_string(max_energy_pooled) +
                      " pooled rows, got " + std::to_string(big_n));

  permutation_result r;
  r.test = options.test;
  r.n_reference = n;
  r.n_recent = m;
  r.block_length = len;

  const bool drawn_is_recent = m <= n;
  const auto x = reference.bottomRows(keep_x);
  const auto y = recent.bottomRows(keep_y);
  const Eigen::MatrixXd drawn = drawn_is_recent ? Eigen::MatrixXd(y) : Eigen::MatrixXd(x);
  const Eigen::MatrixXd other = drawn_is_recent ? Eigen::MatrixXd(x) : Eigen::MatrixXd(y);
  Eigen::MatrixXd pooled(static_cast<Eigen::Index>(big_n), reference.cols());
  pooled << drawn, other;
  bool constant = true;
  for (Eigen::Index i = 1; i < pooled.rows() && constant; ++i)
    constant = (pooled.row(i).array() == pooled.row(0).array()).all();
  if (constant) {
    r.constant_data = true;
    return r;
  }
  auto exact = choose_exact(options, n / len, m / len);
  if (!exact) return exact.err();
  r.statistic = energy_statistic(x, y);

  const Eigen::Index nn = pooled.rows();
  dist_.resize(nn, nn);
  dist_rowsum_.resize(nn);
  for (Eigen::Index j = 0; j < nn; ++j) {
    dist_(j, j) = 0;
    for (Eigen::Index i = j + 1; i < nn; ++i)
      dist_(i, j) = dist_(j, i) = (pooled.row(i) - pooled.row(j)).norm();
  }
  double total = 0;
  for (Eigen::Index j = 0; j < nn; ++j) {
    dist_rowsum_(j) = dist_.col(j).sum();
    total += dist_rowsum_(j);
  }
  const uint32_t k = static_cast<uint32_t>(drawn.rows());
  const uint32_t nt = static_cast<uint32_t>(big_n);
  positions_.resize(nt);
  std::iota(positions_.begin(), positions_.end(), 0u);
  draws_.resize(k);
  const double mean_distance = total / (static_cast<double>(nt) * nt);
  energy_kernel kern{&dist_,
                     dist_rowsum_.data(),
                     positions_.data(),
                     draws_.data(),
                     nt,
                     k,
                     total,
                     1e-13 * k * static_cast<double>(nt - k) / nt * mean_distance};
  subset_.resize(k);
  std::iota(subset_.begin(), subset_.end(), 0u);
  const double observed = kern.exact(subset_.data(), k);
  tally t;
  if (len <= 1) {
    t = drive(kern, exact.value(), nt, k, options.resamples, options.stop_after, subset_, gen,
              observed);
  } else {
    members_.resize(nt);
    std::iota(members_.begin(), members_.end(), 0u);
    units_.resize(nt / len);
    std::iota(units_.begin(), units_.end(), 0u);
    expanded_.resize(k);
    const block_plan plan{members_.data(), units_.data(), draws_.data(), expanded_.data(),
                          nt / len, k / len, len};
    t = drive_blocks(kern, exact.value(), plan, options.resamples, options.stop_after, subset_,
                     gen, observed);
  }
  finish_result(r, t, exact.value(), options.stop_after, options.ci_level);
  return r;
}

expected<permutation_result> permutation_test(std::span<const double> reference,
                                              std::span<const double> recent,
                                              const permutation_options& options, rng& gen) {
  permutation_engine engine;
  return engine.run(reference, recent, options, gen);
}

}  // namespace plumbline
