// The HTTP API routes (DESIGN.md "HTTP"), written against plain request and
// response values. Stage 1 serves GET /v1/health/live and GET /v1/feeds;
// later stages add routes here.
//
// Access: when a read token is configured, GET needs `Authorization: Bearer
// <read or admin token>` (RFC 6750); POST always needs the admin token when
// one is configured. Tokens are compared in constant time and never logged.
#pragma once

#include <optional>
#include <string>

#include "config/config.h"
#include "http_types.h"

namespace lyapcast {

class SampleWriter;
class IngestServer;
class Scheduler;

struct ApiContext {
  const Config* config = nullptr;         // must outlive the handler
  const SampleWriter* writer = nullptr;   // must outlive the handler
  const IngestServer* ingest = nullptr;   // may be null in tests
  const Scheduler* scheduler = nullptr;   // may be null in tests
  std::optional<std::string> read_token;
  std::optional<std::string> admin_token;
  DataTime started_wall = 0;              // wall time at start, µs
  std::string version;
};

HttpHandler MakeApiHandler(ApiContext context);

}  // namespace lyapcast
