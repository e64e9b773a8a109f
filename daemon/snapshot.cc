// snapshot.cc: see snapshot.h.
//
// Design note: durability. The sequence is the classic one for replacing a
// file atomically on a POSIX file system: write a temp file in the same
// directory, fsync it, rename it over the final name (atomic within one
// directory), fsync the directory so that the rename itself is on disk. A
// crash at any point leaves either the old set of snapshots or the old set
// plus the new one, and at worst a temp file, which is never read (its name
// does not match) and is removed at the next start.
#include "daemon/snapshot.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <filesystem>

#include "core/state_codec.h"
#include "daemon/evaluator.h"

namespace plumbline::snapshot {

namespace fs = std::filesystem;

namespace {

std::string errno_text() {
  return std::strerror(errno);
}

// Reads a whole regular file of at most max_file_bytes.
expected<std::string> read_file(const std::string& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC | O_NONBLOCK);
  if (fd < 0) return make_error("cannot open: " + errno_text());
  struct stat st{};
  if (::fstat(fd, &st) != 0) {
    const std::string e = errno_text();
    ::close(fd);
    return make_error("cannot stat: " + e);
  }
  if (!S_ISREG(st.st_mode)) {
    ::close(fd);
    return make_error(S_ISDIR(st.st_mode) ? "a directory, not a file" : "not a regular file");
  }
  if (static_cast<uint64_t>(st.st_size) > max_file_bytes) {
    ::close(fd);
    return make_error("larger than " + std::to_string(max_file_bytes) + " bytes");
  }
  std::string out(static_cast<std::size_t>(st.st_size), '\0');
  std::size_t got = 0;
  while (got < out.size()) {
    const ssize_t r = ::read(fd, out.data() + got, out.size() - got);
    if (r < 0 && errno == EINTR) continue;
    if (r < 0) {
      const std::string e = errno_text();
      ::close(fd);
      return make_error("cannot read: " + e);
    }
    if (r == 0) break;  // shrank while reading: parse() reports it as truncated
    got += static_cast<std::size_t>(r);
  }
  out.resize(got);
  ::close(fd);
  return out;
}

expected<bool> fsync_dir(const std::string& dir) {
  const int fd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd < 0) return make_error("cannot open the directory to sync it: " + errno_text());
  const int r = ::fsync(fd);
  const std::string e = errno_text();
  ::close(fd);
  if (r != 0) return make_error("cannot sync the directory: " + e);
  return true;
}

expected<bool> write_durably(const std::string& dir, const std::string& tmp,
                             const std::string& final_path, std::string_view bytes) {
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) return make_error("cannot create " + tmp + ": " + errno_text());
  std::size_t off = 0;
  while (off < bytes.size()) {
    const ssize_t r = ::write(fd, bytes.data() + off, bytes.size() - off);
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) {
      const std::string e = errno_text();
      ::close(fd);
      ::unlink(tmp.c_str());
      return make_error("cannot write " + tmp + ": " + e);
    }
    off += static_cast<std::size_t>(r);
  }
  if (::fsync(fd) != 0) {
    const std::string e = errno_text();
    ::close(fd);
    ::unlink(tmp.c_str());
    return make_error("cannot sync " + tmp + ": " + e);
  }
  if (::close(fd) != 0) {
    const std::string e = errno_text();
    ::unlink(tmp.c_str());
    return make_error("cannot close " + tmp + ": " + e);
  }
  if (::rename(tmp.c_str(), final_path.c_str()) != 0) {
    const std::string e = errno_text();
    ::unlink(tmp.c_str());
    return make_error("cannot rename " + tmp + " to " + final_path + ": " + e);
  }
  return fsync_dir(dir);
}

bool is_temp_name(std::string_view name) {
  return name.starts_with(".snapshot-") && name.ends_with(".tmp");
}

// The generation in a snapshot name or a set-aside name ("snapshot-G.plbs.bad.2").
std::optional<uint64_t> generation_prefix(std::string_view name) {
  const std::size_t full = file_name(0).size();
  if (name.size() < full) return std::nullopt;
  return generation_of(name.substr(0, full));
}

}  // namespace

std::string encode_stream(const stream_entry& e) {
  stream_head head{e.name, e.group->name, e.dimension};
  stream_fields f;
  f.since_trigger = e.since_trigger;
  f.primed = e.primed;
  f.last_sample_time = e.last_sample_time;
  f.last_trigger_time = e.last_trigger_time;
  f.evaluations = e.evaluations;
  f.last_evaluation_time = e.last_evaluation_time;
  f.last_evaluation_seconds = e.last_evaluation_seconds;
  std::string out;
  write_stream(out, head, f);
  state_codec::writer w(out);
  state_codec::encode(w, e.monitor);
  return out;
}

bool restore_stream(std::string_view payload, stream_entry& e, double now, std::string& error,
                    uint32_t version) {
  stream_head head;
  stream_fields f;
  std::size_t monitor_at = 0;
  if (!read_stream(payload, head, f, monitor_at, error, version)) return false;
  if (head.name != e.name) {
    error = "the section is for another stream";
    return false;
  }
  state_codec::reader r(payload.substr(monitor_at));
  if (!state_codec::decode(r, e.monitor, now)) {
    error = r.error();
    return false;
  }
  e.since_trigger = f.since_trigger;
  e.primed = f.primed;
  e.last_sample_time = f.last_sample_time;
  e.last_trigger_time = f.last_trigger_time;
  e.evaluations = f.evaluations;
  e.last_evaluation_time = f.last_evaluation_time;
  e.last_evaluation_seconds = f.last_evaluation_seconds;
  return true;
}

snapshotter::snapshotter(std::string dir, stream_table& streams, uint64_t seed, status& st,
                         log_fn log)
    : dir_(std::move(dir)), streams_(streams), seed_(seed), status_(st), log_(std::move(log)) {}

void snapshotter::set_aside(const std::string& name, const std::string& reason) {
  const fs::path from = fs::path(dir_) / name;
  std::string to = from.string() + ".bad";
  std::error_code ec;
  for (int i = 1; fs::exists(fs::symlink_status(to, ec)) && i < 1000; ++i)
    to = from.string() + ".bad." + std::to_string(i);
  fs::rename(from, to, ec);
  if (ec) {
    log_(2, "snapshot " + from.string() + " is unusable (" + reason +
                "), and it could not be set aside: " + ec.message());
  } else {
    log_(1, "snapshot " + from.string() + " is unusable (" + reason + "); set aside as " + to);
  }
}

std::size_t snapshotter::restore(double now) {
  std::lock_guard lock(mu_);
  std::error_code ec;
  fs::create_directories(dir_, ec);
  if (ec || !fs::is_directory(dir_, ec)) {
    log_(2, "data directory " + dir_ + " cannot be used (" +
                (ec ? ec.message() : std::string("not a directory")) +
                "); starting empty, and snapshots will fail until it can be created");
    return 0;
  }
  std::vector<std::pair<uint64_t, std::string>> candidates;
  uint64_t highest = 0;
  for (fs::directory_iterator it(dir_, ec), end; !ec && it != end; it.increment(ec)) {
    const std::string name = it->path().filename().string();
    if (is_temp_name(name)) {
      std::error_code rm;
      fs::remove(it->path(), rm);
      log_(0, "removed " + it->path().string() + ", an unfinished write (never read)");
      continue;
    }
    if (auto g = generation_prefix(name)) highest = std::max(highest, *g);
    if (auto g = generation_of(name)) candidates.emplace_back(*g, name);
  }
  if (ec) log_(1, "cannot list data directory " + dir_ + ": " + ec.message());
  next_generation_ = highest + 1;
  std::sort(candidates.rbegin(), candidates.rend());
  bool any_bad = false;
  for (const auto& [generation, name] : candidates) {
    const std::string path = (fs::path(dir_) / name).string();
    auto bytes = read_file(path);
    if (!bytes) {
      set_aside(name, bytes.err().message);
      any_bad = true;
      continue;
    }
    auto p = parse(bytes.value());
    if (!p) {
      set_aside(name, p.err().message);
      any_bad = true;
      continue;
    }
    if (p.value().generation != generation) {
      set_aside(name, "its header says generation " + std::to_string(p.value().generation));
      any_bad = true;
      continue;
    }
    if (p.value().seed != seed_)
      log_(1, "snapshot " + path + " was written with evaluation seed " +
                  std::to_string(p.value().seed) + "; the daemon runs with " +
                  std::to_string(seed_) +
                  " (restored streams seed their next evaluations from the running seed)");
    std::size_t restored = 0;
    for (const section& s : p.value().streams) {
      stream_head head;
      stream_fields fields;
      std::size_t at = 0;
      std::string error;
      read_stream(s.payload, head, fields, at, error, p.value().version);  // checked by parse()
      const stream_table::lookup l =
          streams_.find_or_create(head.name, stream_name_hash(head.name), head.dimension);
      if (l.entry == nullptr) {
        log_(1, "snapshot stream " + head.name + " not restored: " +
                    std::string(l.reason == wire::reject_reason::too_many_streams
                                    ? "the stream limit is reached"
                                    : "no group of the configuration matches it"));
        continue;
      }
      std::lock_guard entry_lock(l.entry->mu);
      if (!restore_stream(s.payload, *l.entry, now, error, p.value().version)) {
        log_(1, "snapshot stream " + head.name + " not restored: " + error);
        continue;
      }
      ++restored;
    }
    log_(0, "restored " + std::to_string(restored) + " of " +
                std::to_string(p.value().streams.size()) + " stream(s) from snapshot " + path +
                " (generation " + std::to_string(generation) + ")");
    last_good_ = generation;
    status_.last_good_time.store(p.value().written_at);
    return restored;
  }
  log_(any_bad ? 1 : 0, std::string(any_bad ? "no valid snapshot" : "no snapshot") + " in " +
                            dir_ + "; starting empty");
  return 0;
}

expected<std::string> snapshotter::write_now() {
  std::lock_guard lock(mu_);
  auto r = write_locked();
  if (!r) {
    status_.failures.fetch_add(1);
    log_(2, "snapshot to " + dir_ + " failed: " + r.err().message);
  }
  return r;
}

expected<std::string> snapshotter::write_locked() {
  std::error_code ec;
  fs::create_directories(dir_, ec);
  if (ec) return make_error("cannot create the data directory: " + ec.message());
  std::vector<std::pair<section_kind, std::string>> sections;
  sections.emplace_back(section_kind::daemon, std::string());
  streams_.for_each([&](const stream_entry& e) {
    std::lock_guard entry_lock(e.mu);
    sections.emplace_back(section_kind::stream, encode_stream(e));
  });
  {
    state_codec::writer w(sections.front().second);
    w.u64(seed_);
    w.u64(sections.size() - 1);
  }
  const uint64_t generation = next_generation_++;
  const double written_at = unix_now();
  const std::string bytes = frame(generation, written_at, sections);
  if (bytes.size() > max_file_bytes)
    return make_error("the state is " + std::to_string(bytes.size()) + " bytes, more than " +
                      std::to_string(max_file_bytes));
  const std::string name = file_name(generation);
  const std::string final_path = (fs::path(dir_) / name).string();
  const std::string tmp =
      (fs::path(dir_) / (".snapshot-" + name.substr(9, 16) + ".tmp")).string();
  auto ok = write_durably(dir_, tmp, final_path, bytes);
  if (!ok) return make_error(ok.err().message);
  // Keep this generation and the previous good one; older ones go.
  if (last_good_) {
    for (fs::directory_iterator it(dir_, ec), end; !ec && it != end; it.increment(ec)) {
      const auto g = generation_of(it->path().filename().string());
      if (g && *g < *last_good_) {
        std::error_code rm;
        fs::remove(it->path(), rm);
      }
    }
  }
  last_good_ = generation;
  status_.last_good_time.store(written_at);
  return final_path;
}

}  // namespace plumbline::snapshot
