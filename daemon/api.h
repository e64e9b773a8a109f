// api.h: the daemon's HTTP routes.
//
//   GET  /metrics                          Prometheus text format
//   GET  /healthz                          "ok" while the daemon runs
//   GET  /api/streams[?offset=N&limit=M]   the streams, in creation order
//                                          (limit defaults to 1000, at most 10000)
//   GET  /api/streams/{stream}             one stream: settings, windows, last
//                                          result per test, last interval,
//                                          alarm state and history
//   POST /api/streams/{stream}/rebaseline  collect a new reference (policy
//                                          baseline), or empty both windows
//                                          (lagged), or the recent one (file)
//   POST /api/snapshot                     write a snapshot now (200 with the
//                                          file, 409 without a data directory,
//                                          500 when the write fails)
//   POST /api/reload                       re-read the configuration (200, or
//                                          422 with every error when refused)
//
// Stream names may contain '/', so {stream} is the rest of the path (it may
// also be percent-encoded). POST requests change state: when http.api_token
// is set they need `Authorization: Bearer TOKEN` (else 401); when HTTP
// listens on an address other than loopback and no token is set, they are
// refused with 403. GET stays open for scrapers. Answers are JSON
// (application/json) or plain text and never echo unescaped input: JSON
// strings are escaped by the serializer, and plain-text errors do not
// repeat what was sent.
//
// Thread-safety. handle() may be called from several threads at once.
#pragma once

#include <functional>
#include <string>
#include <vector>

#include "config/options.h"
#include "daemon/http_server.h"
#include "daemon/metrics.h"
#include "daemon/stream_table.h"

namespace plumbline {

// What the daemon does for POST /api/snapshot and POST /api/reload.
struct api_actions {
  struct reload_result {
    bool ok = false;
    std::vector<std::string> errors;  // when refused: "FILE:LINE:COLUMN: message"
    std::size_t streams = 0;
    std::size_t kept_old = 0;
    std::vector<std::string> notes;
  };
  // Empty when snapshots are off.
  std::function<expected<std::string>()> snapshot;
  std::function<reload_result()> reload;
};

class api {
 public:
  api(stream_table& streams, const daemon_metrics& metrics, const config::daemon_config& config,
      bool http_is_loopback, api_actions actions = {});

  http::response handle(const http::request& req) const;

 private:
  http::response streams_list(const http::request& req) const;
  http::response stream_detail(const std::string& name) const;
  http::response rebaseline(const std::string& name) const;
  // nullopt when the POST may go ahead; else the refusal.
  std::optional<http::response> refuse_post(const http::request& req) const;

  stream_table& streams_;
  const daemon_metrics& metrics_;
  const config::daemon_config& config_;
  bool http_is_loopback_;
  api_actions actions_;
};

}  // namespace plumbline
