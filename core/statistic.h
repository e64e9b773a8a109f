// statistic.h: the two-sample statistics of the permutation tests.
//
// Purpose. Names, definitions and a direct (non-resampling) evaluation of
// every statistic, for reporting and as the reference the resampling kernels
// in permutation.cc are checked against. Two samples: the reference sample
// x_1..x_n and the recent sample y_1..y_m; pooled size N = n + m. Signed
// statistics are recent minus reference.
//
//   mean-diff    T = mean(y) - mean(x).
//   median-diff  T = median(y) - median(x); the median of an even count is the
//                mean of the two middle order statistics.
//   welch        T = (mean(y) - mean(x)) / sqrt(s_y^2/m + s_x^2/n), with the
//                unbiased variances (divisor n - 1). Studentizing keeps the
//                permutation test asymptotically valid for equal means under
//                unequal variances (Janssen 1997; Chung & Romano 2013). When
//                both variances are 0 the ratio is +-infinity; it is reported
//                as +-DBL_MAX (the largest finite double) so that it orders
//                above every finite value and serializes as a number.
//   ks           D = max_z |F_y(z) - F_x(z)|, with F the empirical CDFs
//                (right-continuous), evaluated at every pooled value.
//   cvm          T = U / (n m N) - (4 n m - 1) / (6 N), with
//                U = n sum_i (r_i - i)^2 + m sum_j (s_j - j)^2, where r_i (s_j)
//                are the pooled midranks of the sorted x (y) (Anderson 1962,
//                eqs. 9-10; midranks for ties as in SciPy's
//                cramervonmises_2samp).
//   ad           A2akN of Scholz & Stephens (1987), eq. 7: the k-sample
//                Anderson–Darling statistic in its midrank form for ties, k = 2.
//                Non-negative. `ad_standardized` gives (A2akN - 1) / sigma_N,
//                the value SciPy's anderson_ksamp reports; the permutation
//                p-value is the same for both (sigma_N depends on n, m only).
//   energy       E = (n m / N) (2 A - B - C), with A the mean Euclidean
//                distance |x_i - y_j| over all n m pairs, B the mean |x_i - x_k|
//                over all n^2 ordered pairs (i = k included) and C likewise for
//                y (Székely & Rizzo 2004). Rows of any fixed dimension.
//
// Signed statistics (mean-diff, median-diff, welch) are tested two-sided by
// |T|; the others are non-negative and large values speak against H0.
// Thread-safety: pure functions.
#pragma once

#include <Eigen/Core>
#include <optional>
#include <span>
#include <string_view>

namespace plumbline {

enum class test_kind { mean_diff, median_diff, welch, ks, cvm, ad, energy };

// "mean-diff", "median-diff", "welch", "ks", "cvm", "ad", "energy".
std::string_view test_name(test_kind t);
std::optional<test_kind> parse_test_name(std::string_view name);

// True for mean-diff, median-diff and welch (tested by |T|).
bool is_signed(test_kind t);
// True for energy alone: the only statistic defined on rows of dimension > 1.
bool is_multivariate(test_kind t);

// Direct evaluation on two univariate samples. REQUIRES: t != energy (energy
// takes rows; a univariate sample is a one-column matrix), n >= 1, m >= 1;
// welch, cvm, ad need n, m >= 2 and, for ad, not all pooled values equal.
double statistic_value(test_kind t, std::span<const double> reference,
                       std::span<const double> recent);

// Energy statistic on rows (each row one sample). REQUIRES equal column counts.
double energy_statistic(const Eigen::MatrixXd& reference, const Eigen::MatrixXd& recent);

// (A2akN - (k - 1)) / sigma_N for k = 2 (Scholz & Stephens 1987, eq. 4-5).
double ad_standardized(double a2akn, std::size_t n, std::size_t m);

}  // namespace plumbline
