// rng.cc: block fills of the four-lane xoshiro256++ generator.
//
// Design note. The four lanes are stepped together; output i of a block comes
// from lane i % 4 at step i / 4. The scalar path steps four reference
// xoshiro256++ objects in turn. The vector path holds word k of every lane in
// one 256-bit vector (GCC vector extensions) and steps all lanes at once; it
// is compiled twice (AVX2 and baseline x86-64/SSE2 or the host's default)
// and chosen at load time by the ifunc resolver behind `target_clones`. All
// operations are integer shifts, xors and adds, so every path yields the same
// bits; tests/unit/rng_test.cc checks vector against scalar.
#include "core/rng.h"

#include <algorithm>
#include <bit>
#include <cstring>

namespace plumbline {

namespace {

using u64x4 = uint64_t __attribute__((vector_size(32)));


// Not under ThreadSanitizer: the ifunc resolver runs before the sanitizer's
// runtime is set up, and an instrumented resolver crashes at load time.
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    !defined(__SANITIZE_THREAD__)
#define PLUMBLINE_TARGET_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define PLUMBLINE_TARGET_CLONES
#endif

PLUMBLINE_TARGET_CLONES
void fill_lanes_vector(uint64_t* state /* [word][lane], 16 values */, uint64_t* out,
                       std::size_t n) {
  u64x4 s0, s1, s2, s3;
  __builtin_memcpy(&s0, state + 0, 32);
  __builtin_memcpy(&s1, state + 4, 32);
  __builtin_memcpy(&s2, state + 8, 32);
  __builtin_memcpy(&s3, state + 12, 32);
  for (std::size_t i = 0; i < n; i += 4) {
    const u64x4 sum = s0 + s3;
    const u64x4 result = ((sum << 23) | (sum >> 41)) + s0;
    __builtin_memcpy(out + i, &result, 32);
    const u64x4 t = s1 << 17;
    s2 ^= s0;
    s3 ^= s1;
    s1 ^= s2;
    s0 ^= s3;
    s2 ^= t;
    s3 = (s3 << 45) | (s3 >> 19);
  }
  __builtin_memcpy(state + 0, &s0, 32);
  __builtin_memcpy(state + 4, &s1, 32);
  __builtin_memcpy(state + 8, &s2, 32);
  __builtin_memcpy(state + 12, &s3, 32);
}

// Lemire's multiply for a run of descending ranges, without the rejection
// step: out[t] = (src[t] * (range0 - t)) >> 32. Returns true when some low
// word fell below its range, i.e. when the exact method might reject (then
// the caller redoes the run one draw at a time). Vectorises (vpmuludq).
PLUMBLINE_TARGET_CLONES
bool lemire_run(const uint32_t* src, uint32_t* out, uint32_t range0, uint32_t step,
                uint32_t count) {
  uint32_t maybe_reject = 0;
  for (uint32_t t = 0; t < count; ++t) {
    const uint32_t range = range0 - step * t;
    const uint64_t m = static_cast<uint64_t>(src[t]) * range;
    out[t] = static_cast<uint32_t>(m >> 32);
    maybe_reject |= static_cast<uint32_t>(static_cast<uint32_t>(m) < range);
  }
  return maybe_reject != 0;
}

}  // namespace

void rng::bounded_descending(uint32_t* out, uint32_t n, uint32_t k) { bounded_run(out, n, 1, k); }

void rng::bounded_fill(uint32_t* out, uint32_t range, uint32_t count) {
  bounded_run(out, range, 0, count);
}

void rng::bounded_run(uint32_t* out, uint32_t n, uint32_t step, uint32_t k) {
  uint32_t i = 0;
  while (i < k) {
    if (half_ != 0 || pos_ == block || std::endian::native != std::endian::little) {
      out[i] = bounded(n - step * i);
      ++i;
      continue;
    }
    // The u32 stream from here is the buffer's words, low half first: on a
    // little-endian machine, exactly the buffer's bytes read as uint32_t.
    const uint32_t avail = static_cast<uint32_t>(2 * (block - pos_));
    const uint32_t count = std::min(avail, k - i);
    uint32_t words[2 * block];
    std::memcpy(words, buf_.data() + pos_, sizeof(uint32_t) * ((count + 1) & ~1u));
    if (lemire_run(words, out + i, n - step * i, step, count)) {
      for (uint32_t t = 0; t < count; ++t, ++i) out[i] = bounded(n - step * i);
      continue;
    }
    i += count;
    pos_ += (count + 1) / 2;
    half_ = count & 1;
  }
}

rng::rng(uint64_t seed) {
  splitmix64 sm(seed);
  std::array<std::array<uint64_t, 4>, lanes> lane;
  for (auto& l : lane) {
    for (auto& w : l) w = sm.next();
    // xoshiro's state must not be all zero; splitmix64 outputs four zeros in a
    // row for no seed, but guard anyway.
    if ((l[0] | l[1] | l[2] | l[3]) == 0) l[0] = 1;
  }
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j) words_[w * 4 + j] = lane[j][w];
  buf_.fill(0);
}

void rng::fill_scalar(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                      std::size_t n) {
  xoshiro256pp g[lanes] = {xoshiro256pp(lane[0]), xoshiro256pp(lane[1]), xoshiro256pp(lane[2]),
                           xoshiro256pp(lane[3])};
  for (std::size_t i = 0; i < n; i += lanes)
    for (std::size_t j = 0; j < lanes; ++j) out[i + j] = g[j].next();
  for (std::size_t j = 0; j < lanes; ++j) lane[j] = g[j].state();
}

void rng::fill_vector(std::array<std::array<uint64_t, 4>, lanes>& lane, uint64_t* out,
                      std::size_t n) {
  alignas(32) uint64_t t[16];
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j) t[w * 4 + j] = lane[j][w];
  fill_lanes_vector(t, out, n);
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j) lane[j][w] = t[w * 4 + j];
}

bool rng::vector_path_is_avx2() {
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
  __builtin_cpu_init();
  return __builtin_cpu_supports("avx2");
#else
  return false;
#endif
}

void rng::refill() {
  fill_lanes_vector(words_, buf_.data(), block);
  pos_ = 0;
  half_ = 0;
}

rng::state_type rng::state() const {
  state_type s;
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j) s.lane[j][w] = words_[w * 4 + j];
  s.buffer = buf_;
  s.pos = pos_;
  s.half = half_;
  return s;
}

void rng::restore(const state_type& s) {
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t j = 0; j < lanes; ++j) words_[w * 4 + j] = s.lane[j][w];
  buf_ = s.buffer;
  pos_ = s.pos > block ? static_cast<uint32_t>(block) : s.pos;
  half_ = (s.half != 0 && pos_ > 0) ? 1 : 0;
}

}  // namespace plumbline
