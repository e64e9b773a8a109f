// rng.cc: block fills and bulk bounded draws of the four-lane xoshiro256++
// generator.
//
// Design note.
// * Fill. The four lanes are stepped together; output i of a block comes from
//   lane i % 4 at step i / 4. The scalar path steps four reference
//   xoshiro256++ objects in turn. The vector path holds word k of every lane
//   in one 256-bit vector (GCC vector extensions) and steps all lanes at once.
//   It is compiled twice, for AVX2 and for the baseline instruction set
//   (SSE2 on x86-64), and the generator picks one at construction from the
//   CPU's features (use_kernel() overrides it). All operations are integer
//   shifts, xors and adds, so every path yields the same bits;
//   tests/unit/rng_test.cc checks each vector path against the scalar one.
// * Bulk bounded draws. bounded_fill and bounded_descending must return
//   exactly what successive bounded() calls return: Lemire's multiply
//   m = x * r, value m >> 32, where a draw whose low word m mod 2^32 falls
//   below the threshold 2^32 mod r (< r) is rejected and redrawn (Lemire,
//   ACM TOMACS 2019). The fast paths compute the multiply for many draws at
//   once and check only whether some low word fell below r, that is whether
//   a rejection was possible at all; when it was, that run of draws is redone
//   one bounded() call at a time from the same stream position. Results are
//   therefore the same function of the stream on every path; only the speed
//   differs. For r = 1000 a run of 128 draws needs the slow path with
//   probability about 3e-5.
// * Order of work in bounded_run: a pending high half (one bounded() call),
//   then the unread rest of the current block (multiply over the buffered
//   words), then whole blocks straight into the output, then, for fewer than
//   a block's worth of draws, one refill and the buffered path again. In the
//   AVX2 kernel for whole blocks, each block of 64 outputs is generated and
//   multiplied in registers (one pass, no reload of the raw words); the raw
//   block is also kept in the buffer, so a block in which a rejection is
//   possible is redone exactly from there. The generic kernel fills the
//   buffer and then multiplies, with the same contract.
#include "core/rng.h"

#include <algorithm>
#include <bit>
#include <cstring>

#if defined(__x86_64__) && defined(__GNUC__)
#define PLUMBLINE_AVX2_KERNELS 1
#include <immintrin.h>
#endif

namespace plumbline {

namespace {

using u64x4 = uint64_t __attribute__((vector_size(32)));
// The buffer's 64-bit words read as 32-bit halves (low half first on a
// little-endian machine, the order of the u32 stream).
typedef uint32_t __attribute__((may_alias)) u32_alias;

constexpr uint32_t per_block = 2 * rng::block;  // 32-bit values per block

bool cpu_has_avx2() {
#if defined(PLUMBLINE_AVX2_KERNELS)
  static const bool has = [] {
    __builtin_cpu_init();
    return __builtin_cpu_supports("avx2") != 0;
  }();
  return has;
#else
  return false;
#endif
}

// One step of the four lanes: `result` gets their outputs.
[[gnu::always_inline]] inline void step_lanes(u64x4& s0, u64x4& s1, u64x4& s2, u64x4& s3,
                                              u64x4& result) {
  const u64x4 sum = s0 + s3;
  result = ((sum << 23) | (sum >> 41)) + s0;
  const u64x4 t = s1 << 17;
  s2 ^= s0;
  s3 ^= s1;
  s1 ^= s2;
  s0 ^= s3;
  s2 ^= t;
  s3 = (s3 << 45) | (s3 >> 19);
}

[[gnu::always_inline]] inline void load_state(const uint64_t* state, u64x4& s0, u64x4& s1,
                                              u64x4& s2, u64x4& s3) {
  std::memcpy(&s0, state + 0, 32);
  std::memcpy(&s1, state + 4, 32);
  std::memcpy(&s2, state + 8, 32);
  std::memcpy(&s3, state + 12, 32);
}

[[gnu::always_inline]] inline void store_state(uint64_t* state, const u64x4& s0, const u64x4& s1,
                                               const u64x4& s2, const u64x4& s3) {
  std::memcpy(state + 0, &s0, 32);
  std::memcpy(state + 4, &s1, 32);
  std::memcpy(state + 8, &s2, 32);
  std::memcpy(state + 12, &s3, 32);
}

// state: [word][lane], 16 values. REQUIRES: n % 4 == 0.
[[gnu::always_inline]] inline void fill_body(uint64_t* state, uint64_t* out, std::size_t n) {
  u64x4 s0, s1, s2, s3;
  load_state(state, s0, s1, s2, s3);
  for (std::size_t i = 0; i < n; i += 4) {
    u64x4 result;
    step_lanes(s0, s1, s2, s3, result);
    std::memcpy(out + i, &result, 32);
  }
  store_state(state, s0, s1, s2, s3);
}

// Lemire's multiply for a run of ranges range0 - step * t, without the
// rejection step: out[t] = (src[t] * (range0 - step * t)) >> 32. Returns
// true when some low word fell below its range, i.e. when the exact method
// might reject (then the caller redoes the run one draw at a time).
[[gnu::always_inline]] inline bool lemire_body(const u32_alias* src, uint32_t* out, uint32_t range0,
                                               uint32_t step, uint32_t count) {
  uint32_t maybe_reject = 0;
  for (uint32_t t = 0; t < count; ++t) {
    const uint32_t range = range0 - step * t;
    const uint64_t m = static_cast<uint64_t>(src[t]) * range;
    out[t] = static_cast<uint32_t>(m >> 32);
    maybe_reject |= static_cast<uint32_t>(static_cast<uint32_t>(m) < range);
  }
  return maybe_reject != 0;
}

void fill_generic(uint64_t* state, uint64_t* out, std::size_t n) {
  fill_body(state, out, n);
}

bool lemire_generic(const u32_alias* src, uint32_t* out, uint32_t range0, uint32_t step,
                    uint32_t count) {
  return lemire_body(src, out, range0, step, count);
}

// Whole blocks: for each of `blocks` blocks, fills buf with the next block
// and writes its per_block bounded values to out (advancing out and the
// ranges). Stops after the first block where a rejection was possible, whose
// raw values stay in buf; returns the number of blocks before it (all of
// them when there was none).
uint32_t lemire_blocks_generic(uint64_t* state, uint64_t* buf, uint32_t* out, uint32_t range0,
                               uint32_t step, uint32_t blocks) {
  for (uint32_t b = 0; b < blocks; ++b) {
    fill_body(state, buf, rng::block);
    if (lemire_body(reinterpret_cast<const u32_alias*>(buf), out + b * per_block,
                    range0 - step * (b * per_block), step, per_block))
      return b;
  }
  return blocks;
}

#if defined(PLUMBLINE_AVX2_KERNELS)

__attribute__((target("avx2"))) void fill_avx2(uint64_t* state, uint64_t* out, std::size_t n) {
  fill_body(state, out, n);
}

// Lemire's multiply on eight 32-bit values x (in stream order) with their
// ranges: returns the eight values (x * range) >> 32 and clears the lanes
// of `accepted` where the low word x * range mod 2^32 is below the range.
// Even lanes multiply with _mm256_mul_epu32 on the vectors themselves, odd
// lanes on the vectors shifted right by 32; the products' high words are
// the values, their low words decide.
__attribute__((target("avx2"), always_inline)) inline __m256i lemire8(__m256i x, __m256i range,
                                                                      __m256i& accepted) {
  const __m256i even = _mm256_mul_epu32(x, range);
  const __m256i odd = _mm256_mul_epu32(_mm256_srli_epi64(x, 32), _mm256_srli_epi64(range, 32));
  const __m256i value = _mm256_blend_epi32(_mm256_srli_epi64(even, 32), odd, 0xaa);
  const __m256i low = _mm256_blend_epi32(even, _mm256_slli_epi64(odd, 32), 0xaa);
  // low >= range, unsigned, where max(low, range) == low.
  accepted = _mm256_and_si256(accepted, _mm256_cmpeq_epi32(_mm256_max_epu32(low, range), low));
  return value;
}

// Ranges range0 - step * t for t = 0..7, and the step between such vectors.
__attribute__((target("avx2"), always_inline)) inline __m256i first_ranges(uint32_t range0,
                                                                           uint32_t step) {
  const __m256i lane = _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7);
  return _mm256_sub_epi32(_mm256_set1_epi32(static_cast<int>(range0)),
                          _mm256_mullo_epi32(_mm256_set1_epi32(static_cast<int>(step)), lane));
}

__attribute__((target("avx2"))) bool lemire_avx2(const u32_alias* src, uint32_t* out,
                                                 uint32_t range0, uint32_t step, uint32_t count) {
  __m256i range = first_ranges(range0, step);
  const __m256i range_step = _mm256_set1_epi32(static_cast<int>(8 * step));
  __m256i accepted = _mm256_set1_epi32(-1);
  uint32_t t = 0;
  for (; t + 8 <= count; t += 8) {
    const __m256i x = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(src + t));
    _mm256_storeu_si256(reinterpret_cast<__m256i*>(out + t), lemire8(x, range, accepted));
    range = _mm256_sub_epi32(range, range_step);
  }
  const bool maybe_reject = _mm256_movemask_epi8(accepted) != -1;
  return lemire_body(src + t, out + t, range0 - step * t, step, count - t) || maybe_reject;
}

// The contract of lemire_blocks_generic, with the multiply fused into the
// fill: a step's four 64-bit outputs, read as eight 32-bit lanes, are the
// u32 stream in order (low half first), multiplied in registers.
__attribute__((target("avx2"))) uint32_t lemire_blocks_avx2(uint64_t* state, uint64_t* buf,
                                                            uint32_t* out, uint32_t range0,
                                                            uint32_t step, uint32_t blocks) {
  u64x4 s0, s1, s2, s3;
  load_state(state, s0, s1, s2, s3);
  __m256i range = first_ranges(range0, step);
  const __m256i range_step = _mm256_set1_epi32(static_cast<int>(8 * step));
  uint32_t b = 0;
  for (; b < blocks; ++b) {
    __m256i accepted = _mm256_set1_epi32(-1);
    uint32_t* o = out + b * per_block;
    for (std::size_t i = 0; i < rng::block; i += 4) {
      u64x4 result;
      step_lanes(s0, s1, s2, s3, result);
      std::memcpy(buf + i, &result, 32);
      const __m256i value = lemire8(reinterpret_cast<__m256i>(result), range, accepted);
      _mm256_storeu_si256(reinterpret_cast<__m256i*>(o + 2 * i), value);
      range = _mm256_sub_epi32(range, range_step);
    }
    if (_mm256_movemask_epi8(accepted) != -1) break;
  }
  store_state(state, s0, s1, s2, s3);
  return b;
}

#endif

void fill_lanes(bool avx2, uint64_t* state, uint64_t* out, std::size_t n) {
#if defined(PLUMBLINE_AVX2_KERNELS)
  if (avx2) return fill_avx2(state, out, n);
#endif
  (void)avx2;
  fill_generic(state, out, n);
}

bool lemire_run(bool avx2, const u32_alias* src, uint32_t* out, uint32_t range0, uint32_t step,
                uint32_t count) {
#if defined(PLUMBLINE_AVX2_KERNELS)
  if (avx2) return lemire_avx2(src, out, range0, step, count);
#endif
  (void)avx2;
  return lemire_generic(src, out, range0, step, count);
}

uint32_t lemire_blocks(bool avx2, uint64_t* state, uint64_t* buf, uint32_t* out, uint32_t range0,
                       uint32_t step, uint32_t blocks) {
#if defined(PLUMBLINE_AVX2_KERNELS)
  if (avx2) return lemire_blocks_avx2(state, buf, out, range0, step, blocks);
#endif
  (void)avx2;
  return lemire_blocks_generic(state, buf, out, range0, step, blocks);
}

}  // namespace

void rng::bounded_descending(uint32_t* out, uint32_t n, uint32_t k) {
  bounded_run(out, n, 1, k);
}

void rng::bounded_fill(uint32_t* out, uint32_t range, uint32_t count) {
  bounded_run(out, range, 0, count);
}

uint32_t rng::bounded_from_buffer(uint32_t* out, uint32_t range0, uint32_t step, uint32_t count) {
  const uint32_t count_here = std::min(static_cast<uint32_t>(2 * (block - pos_)), count);
  const auto* words = reinterpret_cast<const u32_alias*>(buf_.data() + pos_);
  if (lemire_run(avx2_, words, out, range0, step, count_here)) {
    // A rejection is possible: redo these draws exactly, one at a time.
    for (uint32_t t = 0; t < count_here; ++t)
      out[t] = bounded(range0 - step * t);
    return count_here;
  }
  pos_ += (count_here + 1) / 2;
  half_ = count_here & 1;
  return count_here;
}

void rng::bounded_run(uint32_t* out, uint32_t n, uint32_t step, uint32_t k) {
  uint32_t i = 0;
  while (i < k) {
    if (half_ != 0 || std::endian::native != std::endian::little) {
      out[i] = bounded(n - step * i);
      ++i;
    } else if (pos_ < block) {
      i += bounded_from_buffer(out + i, n - step * i, step, k - i);
    } else if (const uint32_t whole = (k - i) / per_block; whole > 0) {
      const uint32_t done =
          lemire_blocks(avx2_, words_, buf_.data(), out + i, n - step * i, step, whole);
      i += done * per_block;
      // After a block where a rejection was possible, that block waits in
      // the buffer for the exact path; otherwise the buffer is used up.
      pos_ = done < whole ? 0 : static_cast<uint32_t>(block);
      half_ = 0;
    } else {
      refill();
    }
  }
}

rng::rng(uint64_t seed) : avx2_(cpu_has_avx2()) {
  splitmix64 sm(seed);
  std::array<std::array<uint64_t, 4>, lanes> lane;
  for (auto& l : lane) {
    for (auto& w : l)
      w = sm.next();
    // xoshiro's state must not be all zero; splitmix64 outputs four zeros in a
    // row for no seed, but guard anyway.
    if ((l[0] | l[1] | l[2] | l[3]) == 0) l[0] = 1;
  }
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j)
      words_[w * 4 + j] = lane[j][w];
  buf_.fill(0);
}

void rng::use_kernel(kernel k) {
  avx2_ = k != kernel::generic && cpu_has_avx2();
}

void rng::fill_scalar(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                      std::size_t n) {
  xoshiro256pp g[lanes] = {xoshiro256pp(lane[0]), xoshiro256pp(lane[1]), xoshiro256pp(lane[2]),
                           xoshiro256pp(lane[3])};
  for (std::size_t i = 0; i < n; i += lanes)
    for (std::size_t j = 0; j < lanes; ++j)
      out[i + j] = g[j].next();
  for (std::size_t j = 0; j < lanes; ++j)
    lane[j] = g[j].state();
}

void rng::fill_with(kernel k, std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                    std::size_t n) {
  alignas(32) uint64_t t[16];
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j)
      t[w * 4 + j] = lane[j][w];
  fill_lanes(k != kernel::generic && cpu_has_avx2(), t, out, n);
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j)
      lane[j][w] = t[w * 4 + j];
}

void rng::fill_vector(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                      std::size_t n) {
  fill_with(kernel::automatic, lane, out, n);
}

bool rng::vector_path_is_avx2() {
  return cpu_has_avx2();
}

void rng::refill() {
  fill_lanes(avx2_, words_, buf_.data(), block);
  pos_ = 0;
  half_ = 0;
}

rng::state_type rng::state() const {
  state_type s;
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j)
      s.lane[j][w] = words_[w * 4 + j];
  s.buffer = buf_;
  s.pos = pos_;
  s.half = half_;
  return s;
}

void rng::restore(const state_type& s) {
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j)
      words_[w * 4 + j] = s.lane[j][w];
  buf_ = s.buffer;
  pos_ = s.pos > block ? static_cast<uint32_t>(block) : s.pos;
  half_ = (s.half != 0 && pos_ > 0) ? 1 : 0;
}

}  // namespace plumbline
