// bootstrap.cc: the bootstrap drift-interval engine. Definitions in bootstrap.h.
//
// Design note.
// * Per window, once per run: the values centered on their mean (sums of
//   squares stay accurate far from zero), one ascending sort with each
//   value's rank, and circular prefix sums of the centered values and their
//   squares over two laps (so a block that wraps is one subtraction).
// * Per resample, nothing is allocated and only what is needed is drawn:
//   n bounded indices (independent), ceil(n / L) block starts (circular), or
//   one continuation draw per value plus a start per block (stationary).
//   Moment quantities (mean, sd, Cpk) cost O(n) gathers when independent
//   (the n indices come from one rng::bounded_fill call, and the sums run in
//   four fixed lanes, see gather_sums) and O(number of blocks) with blocks,
//   from the prefix sums. Quantiles cost
//   O(n) with no sort and no selection: the resample is counted into the
//   window's sorted positions and the order statistics are read off the
//   running count.
// * The B replicates are sorted once for the interval ends.
// * BCa follows SciPy's scipy.stats.bootstrap where a choice is free (z0 from
//   the mean of the strict and weak percentile of the estimate; the
//   acceleration summed over both windows' jackknives), so reference tests
//   can compare within Monte Carlo error.
#include "core/bootstrap.h"

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <numeric>

#include "core/special.h"

#if defined(__x86_64__) && defined(__GNUC__)
#define PLUMBLINE_AVX2_GATHER 1
#include <immintrin.h>
#elif defined(__SSE2__)
#include <emmintrin.h>
#endif

namespace plumbline {

std::string_view quantity_name(drift_quantity q) {
  switch (q) {
    case drift_quantity::mean_diff: return "mean-diff";
    case drift_quantity::median_diff: return "median-diff";
    case drift_quantity::quantile_diff: return "quantile-diff";
    case drift_quantity::sd_ratio: return "sd-ratio";
    case drift_quantity::cpk: return "cpk";
  }
  return "?";
}

std::string_view method_name(interval_method m) {
  switch (m) {
    case interval_method::percentile: return "percentile";
    case interval_method::basic: return "basic";
    case interval_method::bca: return "bca";
  }
  return "?";
}

std::string_view scheme_name(block_scheme s) {
  return s == block_scheme::circular ? "circular" : "stationary";
}

double sample_quantile(std::span<const double> sorted, double q) {
  const std::size_t n = sorted.size();
  const double h = static_cast<double>(n - 1) * q;
  const std::size_t j = std::min(static_cast<std::size_t>(h), n - 1);
  const double frac = h - static_cast<double>(j);
  if (j + 1 >= n || frac == 0) return sorted[j];
  return sorted[j] + frac * (sorted[j + 1] - sorted[j]);
}

namespace {

bool uses_quantile(drift_quantity q) {
  return q == drift_quantity::median_diff || q == drift_quantity::quantile_diff;
}

double cpk_value(double mean, double sd, const interval_options& o) {
  double d = DBL_MAX;
  if (o.spec_upper) d = std::min(d, *o.spec_upper - mean);
  if (o.spec_lower) d = std::min(d, mean - *o.spec_lower);
  if (sd == 0) return d > 0 ? ratio_cap : (d < 0 ? -ratio_cap : 0.0);
  return std::clamp(d / (3 * sd), -ratio_cap, ratio_cap);
}

double quantity_value(const interval_options& o, const window_summary& x,
                      const window_summary& y) {
  switch (o.quantity) {
    case drift_quantity::mean_diff: return y.mean - x.mean;
    case drift_quantity::median_diff:
    case drift_quantity::quantile_diff: return y.quantile - x.quantile;
    case drift_quantity::sd_ratio:
      if (x.sd == 0) return y.sd == 0 ? 1.0 : ratio_cap;
      return std::min(y.sd / x.sd, ratio_cap);
    case drift_quantity::cpk: return cpk_value(y.mean, y.sd, o);
  }
  return 0;
}

// Sum and sum of squares of c[d[i]], i in [0, n), in four lane sums (lane l
// takes the draws i = l mod 4, the last n mod 4 go to lane 0), added as
// (0 + 1) + (2 + 3). A fixed order, so results are reproducible, and the
// lanes sit side by side in vector registers, so that one vector add serves
// two (SSE2) or four (AVX2) draws: the loop runs at the speed of its loads
// rather than of its adds. Every version gives the same bits.
void finish_lanes(double* lane, const double* c, const uint32_t* d, uint32_t rest, double& s,
                  double& q) {
  for (uint32_t i = 0; i < rest; ++i) {
    const double a = c[d[i]];
    lane[0] += a;
    lane[4] += a * a;
  }
  s = (lane[0] + lane[1]) + (lane[2] + lane[3]);
  q = (lane[4] + lane[5]) + (lane[6] + lane[7]);
}

void gather_sums_generic(const double* c, const uint32_t* d, uint32_t n, double& s, double& q) {
  const uint32_t* const end = d + (n & ~3u);
  double lane[8];  // s0..s3, q0..q3
#if defined(__SSE2__)
  __m128d s01 = _mm_setzero_pd(), s23 = s01, q01 = s01, q23 = s01;
  for (; d != end; d += 4) {
    const __m128d a01 = _mm_loadh_pd(_mm_load_sd(c + d[0]), c + d[1]);
    const __m128d a23 = _mm_loadh_pd(_mm_load_sd(c + d[2]), c + d[3]);
    s01 = _mm_add_pd(s01, a01);
    s23 = _mm_add_pd(s23, a23);
    q01 = _mm_add_pd(q01, _mm_mul_pd(a01, a01));
    q23 = _mm_add_pd(q23, _mm_mul_pd(a23, a23));
  }
  _mm_storeu_pd(lane, s01);
  _mm_storeu_pd(lane + 2, s23);
  _mm_storeu_pd(lane + 4, q01);
  _mm_storeu_pd(lane + 6, q23);
#else
  for (double& v : lane)
    v = 0;
  for (; d != end; d += 4) {
    for (int l = 0; l < 4; ++l) {
      const double a = c[d[l]];
      lane[l] += a;
      lane[4 + l] += a * a;
    }
  }
#endif
  finish_lanes(lane, c, d, n & 3u, s, q);
}

#if defined(PLUMBLINE_AVX2_GATHER)
__attribute__((target("avx2"))) void gather_sums_avx2(const double* c, const uint32_t* d,
                                                      uint32_t n, double& s, double& q) {
  const uint32_t* const end = d + (n & ~3u);
  __m256d sum = _mm256_setzero_pd(), sq = sum;
  for (; d != end; d += 4) {
    const __m128d a01 = _mm_loadh_pd(_mm_load_sd(c + d[0]), c + d[1]);
    const __m128d a23 = _mm_loadh_pd(_mm_load_sd(c + d[2]), c + d[3]);
    const __m256d a = _mm256_set_m128d(a23, a01);
    sum = _mm256_add_pd(sum, a);
    sq = _mm256_add_pd(sq, _mm256_mul_pd(a, a));
  }
  double lane[8];
  _mm256_storeu_pd(lane, sum);
  _mm256_storeu_pd(lane + 4, sq);
  finish_lanes(lane, c, d, n & 3u, s, q);
}
#endif

// The generator's kernel choice (rng::use_kernel) picks the version, so
// that one switch compares every path with the generic one.
void gather_sums(const double* c, const uint32_t* d, uint32_t n, double& s, double& q,
                 const rng& gen) {
#if defined(PLUMBLINE_AVX2_GATHER)
  if (gen.kernel_in_use() == rng::kernel::avx2) return gather_sums_avx2(c, d, n, s, q);
#endif
  (void)gen;
  gather_sums_generic(c, d, n, s, q);
}

window_summary moments(double center, double s, double q, double n) {
  window_summary st;
  st.mean = center + s / n;
  st.sd = n > 1 ? std::sqrt(std::max(0.0, (q - s * s / n) / (n - 1))) : 0.0;
  return st;
}

// Percentile of sorted replicates by linear interpolation (as NumPy's).
double replicate_percentile(const std::vector<double>& v, double p) {
  p = std::clamp(p, 0.0, 1.0);
  return sample_quantile(v, p);
}

}  // namespace

void bootstrap_engine::prepare(window_state& w, std::span<const double> x) {
  const std::size_t n = x.size();
  w.n = n;
  double s = 0;
  for (double v : x) s += v;
  w.center = s / static_cast<double>(n);
  w.centered.resize(n);
  for (std::size_t t = 0; t < n; ++t) w.centered[t] = x[t] - w.center;
  std::vector<uint32_t>& order = draws_;  // scratch
  order.resize(n);
  std::iota(order.begin(), order.end(), 0u);
  std::stable_sort(order.begin(), order.end(), [&](uint32_t a, uint32_t b) { return x[a] < x[b]; });
  w.sorted.resize(n);
  w.rank.resize(n);
  for (std::size_t r = 0; r < n; ++r) {
    w.sorted[r] = x[order[r]];
    w.rank[order[r]] = static_cast<uint32_t>(r);
  }
  w.prefix.resize(2 * n + 1);
  w.prefix_sq.resize(2 * n + 1);
  w.prefix[0] = w.prefix_sq[0] = 0;
  for (std::size_t i = 0; i < 2 * n; ++i) {
    const double v = w.centered[i % n];
    w.prefix[i + 1] = w.prefix[i] + v;
    w.prefix_sq[i + 1] = w.prefix_sq[i] + v * v;
  }
  w.counts.assign(n, 0);
}

window_summary bootstrap_engine::resample(window_state& w,
                                                          const interval_options& o,
                                                          uint32_t block, rng& gen) {
  const uint32_t n = static_cast<uint32_t>(w.n);
  const bool quant = uses_quantile(o.quantity);
  double s = 0, q = 0;
  // Visits one block of `len` consecutive values from `start` (circularly).
  auto visit_block = [&](uint32_t start, uint32_t len) {
    if (quant) {
      for (uint32_t t = 0, i = start; t < len; ++t) {
        ++w.counts[w.rank[i]];
        if (++i == n) i = 0;
      }
    } else {
      s += w.prefix[start + len] - w.prefix[start];
      q += w.prefix_sq[start + len] - w.prefix_sq[start];
    }
  };
  draws_.resize(n);
  uint32_t* d = draws_.data();
  if (block <= 1) {
    gen.bounded_fill(d, n, n);
    if (quant) {
      for (uint32_t i = 0; i < n; ++i) ++w.counts[w.rank[d[i]]];
    } else {
      gather_sums(w.centered.data(), d, n, s, q, gen);
    }
  } else if (o.scheme == block_scheme::circular) {
    const uint32_t blocks = (n + block - 1) / block;
    gen.bounded_fill(d, n, blocks);
    for (uint32_t b = 0; b < blocks; ++b)
      visit_block(d[b], b + 1 < blocks ? block : n - block * (blocks - 1));
  } else {
    // Stationary bootstrap: each value after the first starts a new block
    // with probability threshold / 2^32 = 1 / L (to within 2^-32).
    const uint32_t threshold = static_cast<uint32_t>((uint64_t{1} << 32) / block);
    uint32_t start = gen.bounded(n), len = 1;
    for (uint32_t t = 1; t < n; ++t) {
      if (gen.next_u32() < threshold) {
        visit_block(start, len);
        start = gen.bounded(n);
        len = 1;
      } else {
        ++len;
      }
    }
    visit_block(start, len);
  }
  if (!quant) return moments(w.center, s, q, n);
  window_summary st;
  {
    const double h = static_cast<double>(n - 1) * o.quantile;
    const uint32_t j = std::min(static_cast<uint32_t>(h), n - 1);
    const double frac = h - j;
    double vj = 0, vj1 = 0;
    uint32_t cum = 0;
    bool have_j = false;
    for (uint32_t pos = 0; pos < n; ++pos) {
      cum += w.counts[pos];
      if (!have_j && cum > j) {
        vj = w.sorted[pos];
        have_j = true;
      }
      if (cum > j + 1) {
        vj1 = w.sorted[pos];
        break;
      }
    }
    if (j + 1 >= n) vj1 = vj;
    st.quantile = frac == 0 ? vj : vj + frac * (vj1 - vj);
    std::fill(w.counts.begin(), w.counts.end(), 0u);
  }
  return st;
}

std::vector<double> bootstrap_engine::jackknife(const window_state& w,
                                                const interval_options& o, uint32_t block,
                                                const window_summary& other, bool is_recent) {
  const std::size_t n = w.n;
  const std::size_t len = block <= 1 ? 1 : block;
  const std::size_t groups = (n + len - 1) / len;
  std::vector<double> out(groups);
  std::vector<uint8_t> removed;
  if (uses_quantile(o.quantity) && len > 1) removed.assign(n, 0);
  for (std::size_t g = 0; g < groups; ++g) {
    const std::size_t first = g * len, count = std::min(len, n - first);
    const double kept = static_cast<double>(n - count);
    window_summary st;
    if (uses_quantile(o.quantity)) {
      const std::size_t m = n - count;
      const double h = static_cast<double>(m - 1) * o.quantile;
      const std::size_t j = std::min(static_cast<std::size_t>(h), m - 1);
      const double frac = h - static_cast<double>(j);
      double vj = 0, vj1 = 0;
      if (len == 1) {
        const std::size_t r = w.rank[first];
        vj = w.sorted[j < r ? j : j + 1];
        vj1 = j + 1 < m ? w.sorted[j + 1 < r ? j + 1 : j + 2] : vj;
      } else {
        for (std::size_t t = first; t < first + count; ++t) removed[w.rank[t]] = 1;
        std::size_t seen = 0;
        bool have_j = false;
        for (std::size_t pos = 0; pos < n; ++pos) {
          if (removed[pos]) continue;
          if (!have_j && seen == j) {
            vj = w.sorted[pos];
            have_j = true;
          }
          if (seen == j + 1) {
            vj1 = w.sorted[pos];
            break;
          }
          ++seen;
        }
        if (j + 1 >= m) vj1 = vj;
        for (std::size_t t = first; t < first + count; ++t) removed[w.rank[t]] = 0;
      }
      st.quantile = frac == 0 ? vj : vj + frac * (vj1 - vj);
    } else {
      const double s = w.prefix[n] - (w.prefix[first + count] - w.prefix[first]);
      const double q = w.prefix_sq[n] - (w.prefix_sq[first + count] - w.prefix_sq[first]);
      st = moments(w.center, s, q, kept);
    }
    out[g] = is_recent ? quantity_value(o, other, st) : quantity_value(o, st, other);
  }
  return out;
}

namespace {

expected<bool> check(const interval_options& o, std::span<const double> x,
                     std::span<const double> y) {
  if (!(o.level > 0 && o.level < 1))
    return make_error("the interval level must lie strictly between 0 and 1");
  if (o.resamples < 1 || o.resamples > max_bootstrap_resamples)
    return make_error("bootstrap resamples must be between 1 and " +
                      std::to_string(max_bootstrap_resamples));
  if (o.quantity == drift_quantity::quantile_diff && !(o.quantile > 0 && o.quantile < 1))
    return make_error("the quantile must lie strictly between 0 and 1");
  if (o.quantity == drift_quantity::cpk) {
    if (!o.spec_lower && !o.spec_upper)
      return make_error("cpk needs a lower or an upper specification limit (or both)");
    if ((o.spec_lower && !std::isfinite(*o.spec_lower)) ||
        (o.spec_upper && !std::isfinite(*o.spec_upper)))
      return make_error("specification limits must be finite numbers");
    if (o.spec_lower && o.spec_upper && !(*o.spec_lower < *o.spec_upper))
      return make_error("the lower specification limit must be below the upper one");
  }
  const std::size_t need = o.quantity == drift_quantity::mean_diff ? 2 : 3;
  for (auto [v, side] : {std::pair{x, "reference"}, std::pair{y, "recent"}}) {
    if (v.size() < need)
      return make_error(std::string(side) + " window has " + std::to_string(v.size()) +
                        (v.size() == 1 ? " value" : " values") + "; at least " +
                        std::to_string(need) + " are needed for " +
                        std::string(quantity_name(o.quantity)));
    if (v.size() > max_bootstrap_window)
      return make_error(std::string(side) + " window is too large for the bootstrap");
    for (double t : v)
      if (!std::isfinite(t))
        return make_error(std::string(side) + " window holds a value that is NaN or infinite");
  }
  if (o.block_length > 1 && o.block_length * 2 > std::min(x.size(), y.size()))
    return make_error("block length " + std::to_string(o.block_length) +
                      " is more than half the smaller window (" +
                      std::to_string(std::min(x.size(), y.size())) + " values)");
  return true;
}

}  // namespace

expected<interval_result> bootstrap_engine::run(std::span<const double> reference,
                                                std::span<const double> recent,
                                                const interval_options& o, rng& gen) {
  if (auto ok = check(o, reference, recent); !ok) return ok.err();
  interval_result r;
  r.quantity = o.quantity;
  r.quantile = o.quantity == drift_quantity::median_diff ? 0.5 : o.quantile;
  r.method = r.method_used = o.method;
  r.level = o.level;
  r.scheme = o.scheme;
  r.n_reference = reference.size();
  r.n_recent = recent.size();
  interval_options opt = o;
  opt.quantile = r.quantile;

  prepare(ref_, reference);
  prepare(rec_, recent);
  r.reference_dependence = measure_dependence(reference);
  r.recent_dependence = measure_dependence(recent);

  uint32_t block = opt.block_length;
  if (block == 0) {
    block = 1;
    if (r.reference_dependence.dependent || r.recent_dependence.dependent) {
      const bool circ = opt.scheme == block_scheme::circular;
      const double b =
          std::max(circ ? r.reference_dependence.block_circular
                        : r.reference_dependence.block_stationary,
                   circ ? r.recent_dependence.block_circular : r.recent_dependence.block_stationary);
      const double cap = static_cast<double>(std::min(reference.size(), recent.size()) / 2);
      block = static_cast<uint32_t>(std::ceil(std::min(b, cap)));
      if (block < 2) block = 1;
    }
  }
  r.block_length = block;

  auto full = [&](const window_state& w) {
    window_summary st =
        moments(w.center, w.prefix[w.n], w.prefix_sq[w.n], static_cast<double>(w.n));
    st.quantile = sample_quantile(w.sorted, opt.quantile);
    return st;
  };
  const window_summary x = full(ref_), y = full(rec_);
  r.estimate = quantity_value(opt, x, y);
  switch (opt.quantity) {
    case drift_quantity::mean_diff:
      r.reference_value = x.mean;
      r.recent_value = y.mean;
      break;
    case drift_quantity::median_diff:
    case drift_quantity::quantile_diff:
      r.reference_value = x.quantile;
      r.recent_value = y.quantile;
      break;
    case drift_quantity::sd_ratio:
      r.reference_value = x.sd;
      r.recent_value = y.sd;
      break;
    case drift_quantity::cpk:
      r.reference_value = cpk_value(x.mean, x.sd, opt);
      r.recent_value = r.estimate;
      break;
  }
  auto degenerate = [&](std::string why) {
    r.degenerate = true;
    r.lower = r.upper = r.estimate;
    r.note = std::move(why);
    return r;
  };
  if (opt.quantity == drift_quantity::sd_ratio && x.sd == 0)
    return degenerate("the reference window is constant: the sd ratio is undefined");
  if (opt.quantity == drift_quantity::cpk && y.sd == 0)
    return degenerate("the recent window is constant: Cpk is unbounded");

  const bool resample_reference = opt.quantity != drift_quantity::cpk;
  replicates_.resize(opt.resamples);
  for (uint64_t b = 0; b < opt.resamples; ++b) {
    const window_summary xb = resample_reference ? resample(ref_, opt, block, gen) : x;
    const window_summary yb = resample(rec_, opt, block, gen);
    replicates_[b] = quantity_value(opt, xb, yb);
  }
  r.resamples = opt.resamples;
  {
    double mean = 0, ss = 0;
    for (double v : replicates_) mean += v;
    mean /= static_cast<double>(opt.resamples);
    for (double v : replicates_) ss += (v - mean) * (v - mean);
    r.standard_error =
        opt.resamples > 1 ? std::sqrt(ss / static_cast<double>(opt.resamples - 1)) : 0.0;
  }
  std::sort(replicates_.begin(), replicates_.end());
  if (replicates_.front() == replicates_.back())
    return degenerate("every resample gives the same value (a constant window?)");

  const double alpha = (1 - opt.level) / 2;
  double p_lo = alpha, p_hi = 1 - alpha;
  if (opt.method == interval_method::bca) {
    const auto less = std::lower_bound(replicates_.begin(), replicates_.end(), r.estimate) -
                      replicates_.begin();
    const auto less_eq = std::upper_bound(replicates_.begin(), replicates_.end(), r.estimate) -
                         replicates_.begin();
    const double share = static_cast<double>(less + less_eq) / (2.0 * opt.resamples);
    double num = 0, den = 0;
    auto add = [&](const std::vector<double>& jk) {
      const double nj = static_cast<double>(jk.size());
      double mean = 0;
      for (double v : jk) mean += v;
      mean /= nj;
      for (double v : jk) {
        const double u = (nj - 1) * (mean - v);
        num += u * u * u / (nj * nj * nj);
        den += u * u / (nj * nj);
      }
    };
    if (resample_reference) add(jackknife(ref_, opt, block, y, false));
    add(jackknife(rec_, opt, block, x, true));
    const double z0 = normal_quantile(share);
    const double a = den > 0 ? num / (6 * std::pow(den, 1.5)) : NAN;
    const double z_lo = normal_quantile(alpha), z_hi = -z_lo;
    const double n1 = z0 + z_lo, n2 = z0 + z_hi;
    const double d1 = 1 - a * n1, d2 = 1 - a * n2;
    if (!std::isfinite(z0)) {
      r.method_used = interval_method::percentile;
      r.note = "BCa bias correction is infinite (every resample lies on one side of the "
               "estimate); percentile interval used";
    } else if (!std::isfinite(a)) {
      r.method_used = interval_method::percentile;
      r.note = "BCa acceleration is undefined (all jackknife values are equal); percentile "
               "interval used";
    } else if (!(d1 > 0 && d2 > 0)) {
      r.method_used = interval_method::percentile;
      r.note = "BCa acceleration is too large for this level; percentile interval used";
    } else {
      r.bias_correction = z0;
      r.acceleration = a;
      p_lo = normal_cdf(z0 + n1 / d1);
      p_hi = normal_cdf(z0 + n2 / d2);
    }
  }
  const double q_lo = replicate_percentile(replicates_, p_lo);
  const double q_hi = replicate_percentile(replicates_, p_hi);
  if (opt.method == interval_method::basic) {
    r.lower = 2 * r.estimate - q_hi;
    r.upper = 2 * r.estimate - q_lo;
  } else {
    r.lower = q_lo;
    r.upper = q_hi;
  }
  return r;
}

}  // namespace plumbline
