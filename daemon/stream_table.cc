// stream_table.cc: see stream_table.h.
//
// Design note. The table holds pointers in std::atomic slots. A reader hashes
// the name, starts at slot hash & mask and walks forward until it meets the
// name or an empty slot; writers (one at a time, under create_mu_) fill an
// empty slot with a fully built entry using a release store, so a reader that
// sees the pointer also sees the entry's constant fields. Load stays below one
// half, so a miss ends after about 2.5 probes on average (linear probing,
// Knuth TAOCP vol. 3, 6.4) and the walk always ends.
#include "daemon/stream_table.h"

#include <bit>
#include <cstring>

namespace plumbline {

uint64_t stream_name_hash(std::string_view name) {
  // Eight bytes at a time, little-endian loads, each chunk mixed with a
  // multiply-xorshift; the finaliser is splitmix64's.
  uint64_t h = 0x9e3779b97f4a7c15ull ^ (name.size() * 0xff51afd7ed558ccdull);
  const char* p = name.data();
  std::size_t left = name.size();
  while (left >= 8) {
    uint64_t chunk;
    std::memcpy(&chunk, p, 8);
    if constexpr (std::endian::native == std::endian::big) chunk = __builtin_bswap64(chunk);
    h = (h ^ chunk) * 0xbf58476d1ce4e5b9ull;
    h ^= h >> 31;
    p += 8;
    left -= 8;
  }
  uint64_t tail = 0;
  for (std::size_t i = 0; i < left; ++i)
    tail |= static_cast<uint64_t>(static_cast<unsigned char>(p[i])) << (8 * i);
  h = (h ^ tail) * 0x94d049bb133111ebull;
  h ^= h >> 30;
  h *= 0xbf58476d1ce4e5b9ull;
  h ^= h >> 27;
  h *= 0x94d049bb133111ebull;
  h ^= h >> 31;
  return h;
}

stream_entry::stream_entry(std::string name_, uint64_t hash_,
                           std::shared_ptr<const config::daemon_config> config_,
                           const config::stream_group& group_, uint32_t dimension_,
                           uint64_t daemon_seed)
    : name(std::move(name_)),
      hash(hash_),
      dimension(dimension_),
      seed(stream_seed(daemon_seed, name)),
      config(std::move(config_)),
      group(&group_),
      // Shares the group's settings, kept alive with the configuration.
      monitor(std::shared_ptr<const monitor_settings>(config, &group_.settings), dimension_) {}

namespace {
std::size_t table_size(std::size_t max_streams) {
  return std::bit_ceil(max_streams * 2 < 16 ? std::size_t{16} : max_streams * 2);
}
}  // namespace

stream_table::stream_table(const config::daemon_config& config, std::size_t max_streams,
                           on_create hook)
    : stream_table(std::shared_ptr<const config::daemon_config>(
                       std::shared_ptr<const config::daemon_config>(), &config),
                   max_streams, std::move(hook)) {}

stream_table::stream_table(std::shared_ptr<const config::daemon_config> config,
                           std::size_t max_streams, on_create hook)
    : config_(std::move(config)),
      seed_(config_->evaluation.seed),
      max_streams_(max_streams),
      mask_(table_size(max_streams) - 1),
      slots_(new std::atomic<stream_entry*>[mask_ + 1]),
      entries_(new std::atomic<stream_entry*>[max_streams]),
      hook_(std::move(hook)) {
  for (std::size_t i = 0; i <= mask_; ++i)
    slots_[i].store(nullptr, std::memory_order_relaxed);
  for (std::size_t i = 0; i < max_streams; ++i)
    entries_[i].store(nullptr, std::memory_order_relaxed);
}

stream_table::~stream_table() {
  const std::size_t n = size();
  for (std::size_t i = 0; i < n; ++i)
    delete entries_[i].load(std::memory_order_relaxed);
}

std::shared_ptr<const config::daemon_config> stream_table::config() const {
  std::lock_guard lock(create_mu_);
  return config_;
}

void stream_table::set_config(std::shared_ptr<const config::daemon_config> config) {
  std::lock_guard lock(create_mu_);
  config_ = std::move(config);
}

stream_entry* stream_table::find(std::string_view name, uint64_t hash) const {
  std::size_t i = hash & mask_;
  for (;;) {
    stream_entry* e = slots_[i].load(std::memory_order_acquire);
    if (e == nullptr) return nullptr;
    if (e->hash == hash && e->name == name) return e;
    i = (i + 1) & mask_;
  }
}

stream_table::lookup stream_table::find_or_create(std::string_view name, uint64_t hash,
                                                  uint32_t dimension) {
  if (stream_entry* e = find(name, hash)) return {e, {}};
  std::lock_guard lock(create_mu_);
  if (stream_entry* e = find(name, hash)) return {e, {}};
  const std::size_t n = count_.load(std::memory_order_relaxed);
  if (n >= max_streams_) return {nullptr, wire::reject_reason::too_many_streams};
  const config::stream_group* group = config::find_group(*config_, name);
  if (group == nullptr) return {nullptr, wire::reject_reason::unmatched_stream};
  const uint32_t dim = group->settings.dimension != 0 ? group->settings.dimension : dimension;
  auto* e = new stream_entry(std::string(name), hash, config_, *group, dim, seed_);
  if (hook_) hook_(*e);
  std::size_t i = hash & mask_;
  while (slots_[i].load(std::memory_order_relaxed) != nullptr)
    i = (i + 1) & mask_;
  entries_[n].store(e, std::memory_order_release);
  count_.store(n + 1, std::memory_order_release);
  slots_[i].store(e, std::memory_order_release);
  return {e, {}};
}

}  // namespace plumbline
