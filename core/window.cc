// window.cc: sample windows and their running statistics.
//
// Design note: running mean and variance over a sliding window.
//
// Notation. The window holds x_1..x_n (binary64). u = 2^-53 is the unit
// roundoff. s is the exact sample standard deviation of the stored values,
// xbar their exact mean.
//
// What is kept. An anchor K (itself one of the stored values, see below) and
// two Neumaier-compensated sums over the window, S1 = sum d_i and
// S2 = sum q_i, with d_i = fl(x_i - K) and q_i = fl(d_i * d_i). Push adds d and
// q of the new value, eviction subtracts d and q of the old one. Because K only
// changes at a rebuild, and a rebuild recomputes both sums from the stored
// values, the terms subtracted are bit for bit the terms that were added. Then
//   mean     = K + S1 / n
//   variance = max(0, (S2 - S1^2 / n) / (n - 1)).
// The project builds with -ffp-contract=off; in addition the square is
// formed in a separate, never-inlined function, so that even a build that
// fuses multiply-add (FMA contraction) cannot round it differently on the
// add and the subtract path.
//
// Where the error comes from, with rho = |xbar - K| / s (the anchor's offset
// in standard deviations) and A = n rho^2 / (n - 1), so that
// sum d^2 = (n - 1) s^2 (1 + A):
//   (a) d_i = fl(x_i - K) is exact when x_i and K are within a factor 2 of
//       each other (Sterbenz); otherwise it is off by at most u |x_i - K|,
//       which moves the variance by a relative 2u sqrt(1 + A) at most.
//   (b) each square is rounded: u sum d^2, a relative u (1 + A).
//   (c) the compensated sums are accurate to about 2u |S| + O(m u^2) M,
//       where m is the number of terms added and subtracted since the last
//       rebuild and M the sum of their magnitudes (Higham, "Accuracy and
//       Stability of Numerical Algorithms", 2nd ed., sec. 4.3). For S2 that is
//       a relative 2u (1 + A); for S1^2 / n about 6u A.
//   (d) the final subtraction and division: 2u.
// So the variance is within about u (3 + 2 sqrt(1 + A) + 3 (1 + A) + 6A) of
// the exact variance: the one-pass formula loses accuracy only through A,
// i.e. through the anchor drifting away from the mean. The rebuild rules keep
// every term in check:
//   1. Every `capacity` evictions the sums are rebuilt from the stored values.
//      This bounds m by 2 capacity + n, so the O(m u^2) M term of (c) cannot
//      build up over a long stream. Cost O(n) per `capacity` pushes.
//   2. After every push, if the computed mean lies more than c = 16 computed
//      standard deviations from K (rho > 16, which covers sd == 0 with
//      S1 != 0), the sums are rebuilt. Hence A <= 16^2 n / (n - 1) <= 512 and
//      the bound above is 4658 u = 5.2e-13 for n = 2 and 2365 u = 2.6e-13 for
//      n >= 100; the standard deviation has half that relative error, at
//      least 12.5 significant digits. (An offset of 1e3 sd, as one might
//      first pick, would allow A ~ 1e6 and only about 10 digits.)
//   3. After every push, if the mass M2 (the sum of all q added or subtracted
//      since the last rebuild; M2 = S2 right after one) exceeds 2^20 S2, the
//      sums are rebuilt. This is the case of large outliers leaving the
//      window: while they were in, the compensation term of S2 held the
//      rounding errors of adding their squares to each other, of order u
//      times those squares, and the small squares added meanwhile were
//      accumulated next to it only to that absolute accuracy; once they
//      leave, that absolute error can be large relative to the small S2 that
//      remains (in the unit tests, bursts of readings 1e15 sd out leave a
//      relative error of 3e-3 in the sd without this rule). With
//      M2 <= 2^20 S2 and m <= 3 capacity, the O(m u^2) M2 term is about
//      4e-26 capacity S2: negligible for any window that fits in memory.
//      The same bound covers S1 (Cauchy–Schwarz: its mass is at most
//      sqrt(m M2)).
// The mean: fl(S1 / n) and K + S1 / n round once each, and the errors of (a)
// and (c) in S1 are at most about 4u (|S1 / n| + s); with rho <= 16 the mean
// is within about u (|mean| + 70 s).
//
// The rebuild (two-pass). Pass 1 forms the compensated mean of the stored
// values. Pass 2 picks as the new anchor the stored value nearest that mean.
// Some stored value is always within s of the exact mean (otherwise the sum of
// squared deviations would exceed n s^2 > (n - 1) s^2), so right after a
// rebuild rho < 1 (up to the rounding of the pass-1 mean), and rule 2 cannot
// fire again straight away. Choosing a stored value rather than the mean
// itself makes a window whose values are all equal have d = 0 throughout:
// S1 = S2 = 0, variance exactly 0, mean exactly K. A window that has become
// constant without a rebuild has a computed rho of order 1 / sqrt(u) (or S2
// left as a rounding residue against a much larger mass), so rule 2 or 3
// fires at the push that made it constant. Pass 3 recomputes S1 and S2.
//
// Cost. Rule 1 costs O(1) amortized per push. Rule 2 fires for ordinary
// streams only after a level shift has (nearly) filled the window: a linear
// drift moves the mean by c s in more than c / sqrt(12) ~ 4.6 capacities of
// pushes, so rule 1 always comes first. Rule 3 fires when a value whose square
// dominated the window leaves it; each such value can cause it at most once.
// A rule-3 rebuild at each of several successive pushes needs S2 to fall by
// a factor of about 2^19 from one to the next, so such a run is at most about
// 110 long (the exponent range of binary64), and each run needs values of
// very different magnitudes to have been pushed first.
//
// Alternatives considered. Welford's update with a matching downdate keeps
// M2 = sum (x - mean)^2 directly, but an eviction that removes most of M2
// cancels with an absolute error of u times the old M2, which compensation
// cannot recover because the update is not a plain sum. Shifted sums with
// compensation turn every update into an exact-error addition and leave one
// well-understood cancellation (S2 - S1^2 / n) that rule 2 bounds.
#include "core/window.h"

#include <algorithm>
#include <cassert>
#include <cfloat>
#include <cmath>
#include <limits>

static_assert(std::numeric_limits<double>::is_iec559, "window.cc needs IEEE binary64");
static_assert(FLT_EVAL_METHOD == 0, "window.cc needs double arithmetic without excess precision");

namespace plumbline {
namespace window_detail {
namespace {

// The rounded square, in a function of its own: a caller cannot fuse the
// multiplication into a following addition, so add and subtract see the
// same rounded term.
[[gnu::noinline]] double rounded_square(double d) {
  return d * d;
}

double abs_value(double x) {
  return x < 0 ? -x : x;
}

}  // namespace

void running_moments::add(double x) {
  const double d = x - anchor;
  const double q = rounded_square(d);
  s1.add(d);
  s2.add(q);
  mass += q;
}

void running_moments::remove(double x) {
  const double d = x - anchor;
  const double q = rounded_square(d);
  s1.add(-d);
  s2.add(-q);
  mass += q;
}

bool running_moments::needs_rebuild(std::size_t n) const {
  const double t2 = s2.value();
  // Rule 3 (also catches S2 <= 0 left over with a positive mass).
  if (mass > max_mass_ratio * t2) return true;
  const double t1 = s1.value();
  if (n < 2) return t1 != 0;
  // Rule 2: mean offset d1 = t1 / n against the standard deviation:
  // d1^2 > c^2 s^2  <=>  q (n - 1) > c^2 n v, with q = t1^2 / n = n d1^2 and
  // v = t2 - q = (n - 1) s^2. Holds when v <= 0 < q (sd 0, offset not 0) and
  // when v < 0.
  const double nd = static_cast<double>(n);
  const double q = t1 * t1 / nd;
  const double v = t2 - q;
  return q * (nd - 1) > max_anchor_offset * max_anchor_offset * nd * v;
}

double running_moments::mean(std::size_t n) const {
  if (n == 0) return std::numeric_limits<double>::quiet_NaN();
  return anchor + s1.value() / static_cast<double>(n);
}

double running_moments::variance(std::size_t n) const {
  if (n < 2) return 0;
  const double nd = static_cast<double>(n);
  const double t1 = s1.value();
  double v = (s2.value() - t1 * t1 / nd) / (nd - 1);
  if (v < 0) v = 0;  // rounding only; NaN passes through
  return v;
}

namespace {

// The two-pass rebuild of one column: values are at(0) .. at(n - 1).
template <typename At>
void rebuild_moments(running_moments& m, std::size_t n, At at) {
  m.s1.reset();
  m.s2.reset();
  m.mass = 0;
  if (n == 0) {
    m.anchor = 0;
    return;
  }
  compensated_sum total;
  for (std::size_t i = 0; i < n; ++i)
    total.add(at(i));
  const double center = total.value() / static_cast<double>(n);
  double anchor = at(0);
  double best = abs_value(anchor - center);
  for (std::size_t i = 1; i < n; ++i) {
    const double x = at(i);
    const double dist = abs_value(x - center);
    if (dist < best) {
      best = dist;
      anchor = x;
    }
  }
  m.anchor = anchor;
  for (std::size_t i = 0; i < n; ++i) {
    const double d = at(i) - anchor;
    const double q = rounded_square(d);
    m.s1.add(d);
    m.s2.add(q);
    m.mass += q;
  }
}

}  // namespace
}  // namespace window_detail

// ---------------------------------------------------------------------------
// sample_window

sample_window::sample_window(std::size_t capacity) : buf_(capacity) {
  assert(capacity >= 1);
}

void sample_window::push(double x) {
  ++pushes_;
  if (size_ == 0) {
    buf_[head_] = x;
    size_ = 1;
    moments_ = {};
    moments_.anchor = x;
    evictions_ = 0;
    return;
  }
  if (size_ == buf_.size()) {
    const double old = buf_[head_];
    buf_[head_] = x;
    head_ = head_ + 1 == buf_.size() ? 0 : head_ + 1;
    moments_.remove(old);
    ++evictions_;
  } else {
    buf_[slot(size_)] = x;
    ++size_;
  }
  moments_.add(x);
  if (evictions_ >= buf_.size() || moments_.needs_rebuild(size_)) rebuild();
}

void sample_window::rebuild() {
  window_detail::rebuild_moments(moments_, size_, [this](std::size_t i) { return (*this)[i]; });
  evictions_ = 0;
}

void sample_window::clear() {
  head_ = 0;
  size_ = 0;
  pushes_ = 0;
  evictions_ = 0;
  moments_ = {};
}

void sample_window::set_capacity(std::size_t new_capacity) {
  assert(new_capacity >= 1);
  if (new_capacity == buf_.size()) return;
  const std::size_t keep = std::min(size_, new_capacity);
  std::vector<double> next(new_capacity);
  for (std::size_t i = 0; i < keep; ++i)
    next[i] = (*this)[size_ - keep + i];
  buf_.swap(next);
  head_ = 0;
  size_ = keep;
  rebuild();
}

void sample_window::copy_to(std::vector<double>& out) const {
  out.resize(size_);
  copy_newest_to(out);
}

void sample_window::copy_newest_to(std::span<double> out) const {
  assert(out.size() <= size_);
  const std::size_t k = out.size();
  const std::size_t first = slot(size_ - k);  // slot of the oldest value copied
  const std::size_t run = std::min(k, buf_.size() - first);
  std::copy_n(buf_.data() + first, run, out.data());
  std::copy_n(buf_.data(), k - run, out.data() + run);
}

double sample_window::mean() const {
  return moments_.mean(size_);
}
double sample_window::variance() const {
  return moments_.variance(size_);
}
double sample_window::stddev() const {
  return std::sqrt(variance());
}

// ---------------------------------------------------------------------------
// row_window

row_window::row_window(std::size_t capacity, std::size_t dim)
    : capacity_(capacity), dim_(dim), buf_(capacity * dim), moments_(dim) {
  assert(capacity >= 1 && dim >= 1);
}

void row_window::push(const Eigen::Ref<const Eigen::VectorXd>& row) {
  push(std::span<const double>(row.data(), static_cast<std::size_t>(row.size())));
}

void row_window::push(std::span<const double> row) {
  assert(row.size() == dim_);
  ++pushes_;
  if (size_ == 0) {
    std::copy_n(row.data(), dim_, buf_.data() + head_ * dim_);
    size_ = 1;
    for (std::size_t j = 0; j < dim_; ++j) {
      moments_[j] = {};
      moments_[j].anchor = row[j];
    }
    evictions_ = 0;
    return;
  }
  double* dst;
  if (size_ == capacity_) {
    dst = buf_.data() + head_ * dim_;
    for (std::size_t j = 0; j < dim_; ++j)
      moments_[j].remove(dst[j]);
    head_ = head_ + 1 == capacity_ ? 0 : head_ + 1;
    ++evictions_;
  } else {
    dst = buf_.data() + slot(size_) * dim_;
    ++size_;
  }
  std::copy_n(row.data(), dim_, dst);
  for (std::size_t j = 0; j < dim_; ++j)
    moments_[j].add(row[j]);
  if (evictions_ >= capacity_) {
    rebuild();
    return;
  }
  for (std::size_t j = 0; j < dim_; ++j) {
    if (moments_[j].needs_rebuild(size_)) rebuild_column(j);
  }
}

void row_window::rebuild_column(std::size_t column) {
  window_detail::rebuild_moments(moments_[column], size_, [this, column](std::size_t i) {
    return buf_[slot(i) * dim_ + column];
  });
}

void row_window::rebuild() {
  for (std::size_t j = 0; j < dim_; ++j)
    rebuild_column(j);
  evictions_ = 0;
}

void row_window::clear() {
  head_ = 0;
  size_ = 0;
  pushes_ = 0;
  evictions_ = 0;
  for (auto& m : moments_)
    m = {};
}

void row_window::set_capacity(std::size_t new_capacity) {
  assert(new_capacity >= 1);
  if (new_capacity == capacity_) return;
  const std::size_t keep = std::min(size_, new_capacity);
  std::vector<double> next(new_capacity * dim_);
  for (std::size_t i = 0; i < keep; ++i) {
    const double* src = buf_.data() + slot(size_ - keep + i) * dim_;
    std::copy_n(src, dim_, next.data() + i * dim_);
  }
  buf_.swap(next);
  capacity_ = new_capacity;
  head_ = 0;
  size_ = keep;
  rebuild();
}

void row_window::copy_to(Eigen::MatrixXd& out) const {
  using row_major =
      Eigen::Map<const Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>>;
  const auto rows = static_cast<Eigen::Index>(size_);
  const auto cols = static_cast<Eigen::Index>(dim_);
  out.resize(rows, cols);
  if (size_ == 0) return;
  const std::size_t run = std::min(size_, capacity_ - head_);
  const auto first = static_cast<Eigen::Index>(run);
  out.topRows(first) = row_major(buf_.data() + head_ * dim_, first, cols);
  if (run < size_) out.bottomRows(rows - first) = row_major(buf_.data(), rows - first, cols);
}

Eigen::VectorXd row_window::mean() const {
  Eigen::VectorXd out(static_cast<Eigen::Index>(dim_));
  for (std::size_t j = 0; j < dim_; ++j)
    out[static_cast<Eigen::Index>(j)] = mean(j);
  return out;
}

Eigen::VectorXd row_window::variance() const {
  Eigen::VectorXd out(static_cast<Eigen::Index>(dim_));
  for (std::size_t j = 0; j < dim_; ++j)
    out[static_cast<Eigen::Index>(j)] = variance(j);
  return out;
}

double row_window::mean(std::size_t column) const {
  return moments_[column].mean(size_);
}
double row_window::variance(std::size_t column) const {
  return moments_[column].variance(size_);
}

}  // namespace plumbline
