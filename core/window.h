// window.h: fixed-capacity sample windows with running mean and variance.
//
// Purpose. A stream keeps its most recent values in a window: a ring buffer of
// fixed capacity. `sample_window` holds univariate values, `row_window` holds
// rows of a fixed dimension (one row per multivariate measurement). Pushing
// into a full window evicts the oldest value first. Both keep running
// statistics (mean and the unbiased variance, divisor n - 1, per column for
// rows) that are read in O(1) and are as accurate as a careful two-pass
// computation over the stored values, however long the stream has run and
// however far it has drifted. The design and its error bounds are written
// out at the top of window.cc; in short:
//
//   * the sums of d = x - K and d^2 about an anchor K are kept with Neumaier
//     (improved Kahan) compensation, adding on push and subtracting on evict;
//   * they are rebuilt from the stored values (two-pass: K becomes the stored
//     value nearest the mean, then compensated sums) every `capacity`
//     evictions, when the window's mean lies more than `max_anchor_offset`
//     standard deviations from K, and when the squares that passed through
//     the sums since the last rebuild outweigh the current ones by more than
//     `max_mass_ratio` (a large outlier leaving the window). Rebuilds cost
//     O(size) and come at most once per `capacity` pushes for ordinary
//     streams, so push is O(1) amortized.
//
// Guarantees, for the exact values of the stored binary64 numbers, in IEEE
// binary64 arithmetic with round-to-nearest and no excess precision
// (-ffast-math voids them), to first order in the unit roundoff: the variance
// is within a relative 5.2e-13 (2.6e-13 once n >= 100) and so the standard
// deviation within 2.6e-13 (1.3e-13), i.e. at least 12 significant digits;
// the mean is within about 1.1e-16 * (|mean| + 70 * sd). The variance is
// never negative, and a window whose values are all equal has variance
// exactly 0 and mean exactly that value. Values must be finite, and their
// spread such that its square neither overflows nor underflows (between about
// 1e-150 and 1e150). A NaN or infinity makes the statistics non-finite until
// it has left the window and at most `capacity` more values have been pushed.
//
// Storage is allocated once, at construction (and again only by
// set_capacity); push never allocates.
//
// Thread-safety: none. A window has one owner (one stream's evaluation);
// const members may be called concurrently only while nobody pushes.
//
// Invariants. 0 <= size() <= capacity(); element 0 is the oldest, size() - 1
// the newest; after every public call the running sums satisfy the three
// rebuild conditions above (none is pending).
#pragma once

#include <Eigen/Core>
#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

namespace plumbline {

struct state_codec_access;

namespace window_detail {

// A running sum with Neumaier's compensation ("Rundungsfehleranalyse einiger
// Verfahren zur Summation endlicher Summen", ZAMM 54, 1974): `comp` collects
// the exact rounding error of every addition, so value() = sum + comp is the
// sum of the terms with an error of about u |sum| + O(m u^2) sum |terms|.
struct compensated_sum {
  double sum = 0;
  double comp = 0;

  void add(double t) {
    const double s = sum + t;
    if ((sum < 0 ? -sum : sum) >= (t < 0 ? -t : t)) {
      comp += (sum - s) + t;
    } else {
      comp += (t - s) + sum;
    }
    sum = s;
  }
  double value() const { return sum + comp; }
  void reset() { sum = comp = 0; }
};

// The running moments of one column: anchor, compensated sums of d and d^2,
// and the mass (sum of all d^2 added or subtracted since the last rebuild).
struct running_moments {
  double anchor = 0;
  compensated_sum s1;
  compensated_sum s2;
  double mass = 0;

  void add(double x);
  void remove(double x);
  // True when the offset or mass condition asks for a rebuild (n = size).
  bool needs_rebuild(std::size_t n) const;
  double mean(std::size_t n) const;
  double variance(std::size_t n) const;
};

}  // namespace window_detail

// The window's mean may lie at most this many standard deviations from the
// anchor before the sums are rebuilt (see window.cc for why 16).
inline constexpr double max_anchor_offset = 16;
// Rebuild once the squares added and removed since the last rebuild sum to
// more than this multiple of the current sum of squares.
inline constexpr double max_mass_ratio = 0x1p20;

class sample_window {
 public:
  // REQUIRES: capacity >= 1.
  explicit sample_window(std::size_t capacity);

  // Appends x; when full, evicts the oldest value first. O(1) amortized.
  // REQUIRES: x finite (see the header comment for what a non-finite x does).
  void push(double x);

  std::size_t size() const { return size_; }
  std::size_t capacity() const { return buf_.size(); }
  bool full() const { return size_ == buf_.size(); }
  bool empty() const { return size_ == 0; }
  // Total pushes since construction or the last clear().
  uint64_t pushes() const { return pushes_; }

  // The storage slot the next push() writes (for a prefetch hint: the
  // ingest path asks for it a few records ahead). Never dereferenced here.
  const double* next_slot() const {
    return buf_.data() + (size_ == buf_.size() ? head_ : slot(size_));
  }

  // i = 0 is the oldest value, size() - 1 the newest. REQUIRES: i < size().
  double operator[](std::size_t i) const { return buf_[slot(i)]; }
  // REQUIRES: !empty().
  double newest() const { return buf_[slot(size_ - 1)]; }

  // Empties the window (capacity unchanged) and resets pushes().
  void clear();

  // Changes the capacity, keeping the newest min(size(), new_capacity)
  // values in order; pushes() is unchanged. Allocates. REQUIRES:
  // new_capacity >= 1.
  void set_capacity(std::size_t new_capacity);

  // All values, oldest first; out is resized to size() (its capacity is
  // reused, so a long-lived `out` stops allocating).
  void copy_to(std::vector<double>& out) const;
  // The newest out.size() values, oldest of them first.
  // REQUIRES: out.size() <= size().
  void copy_newest_to(std::span<double> out) const;

  // Mean of the values; NaN when empty.
  double mean() const;
  // Unbiased variance (divisor n - 1); 0 when size() < 2. Never negative.
  double variance() const;
  double stddev() const;

 private:
  std::size_t slot(std::size_t i) const {
    const std::size_t j = head_ + i;
    return j < buf_.size() ? j : j - buf_.size();
  }
  void rebuild();
  friend struct state_codec_access;  // core/state_codec.cc: snapshots

  std::vector<double> buf_;
  std::size_t head_ = 0;  // slot of the oldest value
  std::size_t size_ = 0;
  uint64_t pushes_ = 0;
  std::size_t evictions_ = 0;  // since the last rebuild
  window_detail::running_moments moments_;
};

class row_window {
 public:
  // REQUIRES: capacity >= 1, dim >= 1.
  row_window(std::size_t capacity, std::size_t dim);

  // Appends a row; when full, evicts the oldest row first. O(dim) amortized.
  // REQUIRES: row.size() == dim(), entries finite.
  void push(std::span<const double> row);
  void push(const Eigen::Ref<const Eigen::VectorXd>& row);

  std::size_t size() const { return size_; }
  std::size_t capacity() const { return capacity_; }
  std::size_t dim() const { return dim_; }
  bool full() const { return size_ == capacity_; }
  bool empty() const { return size_ == 0; }
  uint64_t pushes() const { return pushes_; }

  // Row i (0 = oldest), a view into the window valid until the next
  // non-const call. REQUIRES: i < size().
  Eigen::Map<const Eigen::VectorXd> row(std::size_t i) const {
    return Eigen::Map<const Eigen::VectorXd>(buf_.data() + slot(i) * dim_,
                                             static_cast<Eigen::Index>(dim_));
  }

  void clear();
  // As sample_window::set_capacity, row by row.
  void set_capacity(std::size_t new_capacity);

  // The rows, oldest first, as a size() x dim() matrix.
  void copy_to(Eigen::MatrixXd& out) const;

  // Per-column mean (NaN when empty) and unbiased variance (0 when
  // size() < 2), as vectors of dim() entries, and one column at a time
  // (REQUIRES: column < dim()), which does not allocate.
  Eigen::VectorXd mean() const;
  Eigen::VectorXd variance() const;
  double mean(std::size_t column) const;
  double variance(std::size_t column) const;

 private:
  std::size_t slot(std::size_t i) const {
    const std::size_t j = head_ + i;
    return j < capacity_ ? j : j - capacity_;
  }
  void rebuild_column(std::size_t column);
  void rebuild();
  friend struct state_codec_access;  // core/state_codec.cc: snapshots

  std::size_t capacity_;
  std::size_t dim_;
  std::vector<double> buf_;  // capacity * dim, row-major, slot-indexed
  std::size_t head_ = 0;
  std::size_t size_ = 0;
  uint64_t pushes_ = 0;
  std::size_t evictions_ = 0;
  std::vector<window_detail::running_moments> moments_;  // one per column
};

}  // namespace plumbline
