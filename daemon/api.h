// The HTTP API routes (docs/http-api.md), written against plain request
// and response values; Beast stays in http_server.cpp.
//
// Access: when a read token is configured, GET needs `Authorization: Bearer
// <read or admin token>` (RFC 6750); POST needs the admin token when one is
// configured. Tokens are compared in constant time and never logged.
// `GET /v1/heartbeat` (is the process up, is storage writable) is always open.
//
// Threads: the handler runs on io threads; it reads published state
// (atomic model pointers, snapshots under short locks) and short SQLite
// reads through ApiStore; it never waits for training.
#pragma once

#include <optional>
#include <string>

#include "config/config.h"
#include "http_types.h"

namespace lyapcast {

class SampleWriter;
class IngestServer;
class Scheduler;
class FeedRuntimes;
class ApiStore;

struct ApiContext {
  const Config* config = nullptr;         // required; all pointers must outlive the handler
  const SampleWriter* writer = nullptr;   // required
  const IngestServer* ingest = nullptr;   // may be null in tests
  Scheduler* scheduler = nullptr;         // required for the feed routes
  FeedRuntimes* runtimes = nullptr;       // required for the feed routes
  ApiStore* store = nullptr;              // required for models and samples
  std::optional<std::string> read_token;
  std::optional<std::string> admin_token;
  WallTime started_wall{};              // when the daemon started
  std::string version;
};

struct ApiHandlers {
  HttpHandler request;
  // For HttpServerOptions::head: refuses an upload's token before its body
  // is read, and allows an upload's body up to kMaxUploadBytes
  // (schedule/model_upload.h); other routes keep the server's limit.
  HeadHandler head;
};
ApiHandlers MakeApiHandlers(ApiContext context);

}  // namespace lyapcast
