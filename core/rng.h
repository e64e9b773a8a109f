// rng.h: the engine's random numbers, reproducible bit for bit from a seed.
//
// Purpose. Every resampling result in plumbline is a function of (seed, data)
// alone, on any platform and compiler. So the generator and every derived
// draw are defined here, in integer arithmetic, and no std:: distribution is
// used anywhere in results.
//
// Generator. `rng` runs four independent xoshiro256++ lanes (Blackman &
// Vigna, "Scrambled linear pseudorandom number generators", 2021). Lane j is
// seeded from the splitmix64 sequence of the user's seed (outputs 4j..4j+3).
// The output stream interleaves the lanes: lane 0, 1, 2, 3, 0, 1, ... Values
// are produced a block at a time; the block fill has a vectorised path (GCC
// vector extensions, compiled for AVX2 when the CPU has it) and a scalar
// fallback that yields exactly the same numbers (tests check this).
//
// Kernels. The block fill and the bulk bounded draws (bounded_fill,
// bounded_descending) have two implementations each: an AVX2 one, in which
// whole blocks are generated and turned into bounded values in registers
// (Lemire's multiply fused into the fill), and a generic one (the vector fill
// built for the baseline instruction set, then one multiply per value). Both
// give exactly the numbers of successive bounded() calls, and a block in which
// Lemire's method might reject a draw is redone one bounded() at a time, so
// every result is the same function of the stream. The AVX2 kernels run when
// the CPU has AVX2; use_kernel() selects one per generator, so that tests can
// compare them (engines with vector loops of their own, such as the
// bootstrap's sums, follow the same choice through kernel_in_use()).
//
// Derived draws.
//   next_u64()      uniform on [0, 2^64).
//   next_u32()      uniform on [0, 2^32): the low half of a 64-bit output, then
//                   its high half.
//   bounded(r)      uniform on [0, r) for 1 <= r < 2^32, by Lemire's
//                   multiply-and-reject method ("Fast random integer generation
//                   in an interval", ACM TOMACS 2019). Exact, no modulo bias.
//   next_double()   uniform on [0, 1) on the grid k / 2^53 (top 53 bits).
// A next_u64() or next_double() after an odd number of next_u32() calls
// discards the pending high half; the stream stays fully determined.
//
// Thread-safety: none. An `rng` belongs to one thread (one evaluation); the
// daemon gives each stream its own. Never global: always passed in.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>

namespace plumbline {

// splitmix64 (Steele, Lea & Flood 2014; public-domain reference by Vigna):
// used to expand a 64-bit seed into generator state.
class splitmix64 {
 public:
  explicit splitmix64(uint64_t seed) : state_(seed) {}
  uint64_t next() {
    uint64_t z = (state_ += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
  }

 private:
  uint64_t state_;
};

// One xoshiro256++ generator (reference algorithm, scalar).
class xoshiro256pp {
 public:
  explicit xoshiro256pp(const std::array<uint64_t, 4>& s) : s_(s) {}
  uint64_t next() {
    const uint64_t result = rotl(s_[0] + s_[3], 23) + s_[0];
    const uint64_t t = s_[1] << 17;
    s_[2] ^= s_[0];
    s_[3] ^= s_[1];
    s_[1] ^= s_[2];
    s_[0] ^= s_[3];
    s_[2] ^= t;
    s_[3] = rotl(s_[3], 45);
    return result;
  }
  const std::array<uint64_t, 4>& state() const { return s_; }

 private:
  static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  std::array<uint64_t, 4> s_;
};

class rng {
 public:
  static constexpr std::size_t lanes = 4;
  static constexpr std::size_t block = 64;  // 64-bit values per refill

  // Implementation of the block kernels (see "Kernels" above). automatic is
  // avx2 when the CPU has AVX2, else generic; avx2 on a CPU without AVX2 runs
  // generic. The choice changes the speed only, never a number.
  enum class kernel { automatic, avx2, generic };

  // Complete generator state, for snapshots: restoring it continues the
  // stream exactly where it was.
  struct state_type {
    std::array<std::array<uint64_t, 4>, lanes> lane{};  // xoshiro state per lane
    std::array<uint64_t, block> buffer{};                // current block
    uint32_t pos = block;        // next unread 64-bit value in buffer
    uint32_t half = 0;           // 1 when the high 32 bits of buffer[pos-1] are pending
    bool operator==(const state_type&) const = default;
  };

  explicit rng(uint64_t seed);

  uint64_t next_u64() {
    if (pos_ == block) refill();
    half_ = 0;
    return buf_[pos_++];
  }

  uint32_t next_u32() {
    if (half_) {
      half_ = 0;
      return static_cast<uint32_t>(buf_[pos_ - 1] >> 32);
    }
    if (pos_ == block) refill();
    half_ = 1;
    return static_cast<uint32_t>(buf_[pos_++]);
  }

  // Uniform on [0, range). REQUIRES: 1 <= range.
  uint32_t bounded(uint32_t range) {
    uint64_t m = static_cast<uint64_t>(next_u32()) * range;
    uint32_t low = static_cast<uint32_t>(m);
    if (low < range) [[unlikely]] {
      const uint32_t threshold = static_cast<uint32_t>(-range) % range;
      while (low < threshold) {
        m = static_cast<uint64_t>(next_u32()) * range;
        low = static_cast<uint32_t>(m);
      }
    }
    return static_cast<uint32_t>(m >> 32);
  }

  double next_double() { return static_cast<double>(next_u64() >> 11) * 0x1.0p-53; }

  // out[i] = bounded(n - i) for i in [0, k): exactly the numbers k successive
  // bounded() calls would return (the draws of a partial Fisher–Yates
  // shuffle), computed a block at a time. REQUIRES: k <= n.
  void bounded_descending(uint32_t* out, uint32_t n, uint32_t k);

  // out[i] = bounded(range) for i in [0, count): exactly the numbers count
  // successive bounded(range) calls would return (bootstrap indices).
  // REQUIRES: range >= 1.
  void bounded_fill(uint32_t* out, uint32_t range, uint32_t count);

  // Selects the kernel implementation for this generator (the default is
  // automatic). It is not part of state(): a restored generator keeps its own.
  void use_kernel(kernel k);
  // The implementation that runs: avx2 or generic, never automatic.
  kernel kernel_in_use() const { return avx2_ ? kernel::avx2 : kernel::generic; }

  state_type state() const;
  void restore(const state_type& s);

  // Block fills, exposed for tests and benchmarks: each advances `lane` by
  // out.size()/lanes steps and writes the interleaved outputs.
  // REQUIRES: n is a multiple of `lanes`.
  static void fill_scalar(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                          std::size_t n);
  static void fill_vector(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                          std::size_t n);
  // The vector fill with a chosen kernel (fill_vector uses kernel::automatic).
  static void fill_with(kernel k, std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                        std::size_t n);
  // True when fill_vector runs the AVX2 path on this CPU.
  static bool vector_path_is_avx2();

 private:
  void refill();
  // Shared body of bounded_descending (step 1) and bounded_fill (step 0):
  // out[i] = bounded(range0 - step * i).
  void bounded_run(uint32_t* out, uint32_t range0, uint32_t step, uint32_t count);
  // The same from the unread part of the current block only: returns how many
  // values it wrote, min(count, 64-bit values left * 2).
  // REQUIRES: half_ == 0 and pos_ < block.
  uint32_t bounded_from_buffer(uint32_t* out, uint32_t range0, uint32_t step, uint32_t count);

  // Generator state in vector layout: words_[4 * w + j] is word w of lane j
  // (transposed from state_type::lane, so a refill needs no shuffling).
  alignas(32) uint64_t words_[16];
  alignas(64) std::array<uint64_t, block> buf_;
  uint32_t pos_ = block;
  uint32_t half_ = 0;
  bool avx2_ = false;  // the kernel in use (see use_kernel)
};

}  // namespace plumbline
