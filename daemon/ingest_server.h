// IngestServer: the TCP listener for sample lines (docs/protocol.md "Sample
// line format"). Each connection is a session that splits the byte stream into
// lines, parses them (lib/ingest), submits good samples to the SampleWriter
// and answers every line exactly once, in order: `ok <n>` after its
// transaction committed, or `error <line> <code> <text>`.
//
// Backpressure: a session stops reading its socket while it has more than
// `max_outstanding` samples awaiting commit or more than `max_pending_output`
// bytes of replies the client has not read yet; TCP then slows the sender.
// Nothing is dropped.
//
// Threads: all calls on the io_context's threads (the constructor and
// Listen() before io_context::run). Sessions run on their own strands.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <string>

#include "config/config.h"
#include "core/reject_reason.h"
#include "core/status.h"

namespace boost::asio {
class io_context;
}

namespace lyapcast {

class SampleWriter;

struct IngestServerOptions {
  Endpoint endpoint;
  std::size_t max_line = 64 * 1024;
  int max_connections = 256;
  Micros idle_timeout = 5 * 60 * kSecond;
  Micros max_future_skew = 10 * kSecond;
  std::optional<std::string> token;        // required `auth <token>` first line when set
  std::size_t max_outstanding = 16384;     // samples per connection awaiting commit
  std::size_t max_pending_output = 1 << 20;  // reply bytes per connection not yet sent
  Micros shutdown_grace = 10 * kSecond;  // then remaining sessions are closed
};

// Totals since start, readable from any thread.
struct IngestCounters {
  std::atomic<std::uint64_t> connections_accepted{0};
  std::atomic<std::uint64_t> connections_refused{0};
  std::atomic<std::uint64_t> lines{0};
  std::atomic<std::uint64_t> accepted{0};
  std::atomic<std::uint64_t> rejected[kRejectReasonCount] = {};
};

class IngestServer {
 public:
  // `config` and `writer` must outlive the server.
  IngestServer(boost::asio::io_context& io, const Config& config, SampleWriter& writer, IngestServerOptions options);
  ~IngestServer();

  // Binds and listens. Errors name the endpoint and the OS reason.
  [[nodiscard]] Status Listen();
  std::uint16_t port() const;  // after Listen(); the real port when 0 was asked
  void StartAccepting();

  // Stops accepting; each session stops reading, finishes the lines it has
  // received (commit and reply) and closes. `done` runs (on an io thread)
  // once every session is closed or shutdown_grace has passed.
  void Shutdown(std::function<void()> done);

  const IngestCounters& counters() const;
  int active_connections() const;

 private:
  struct Impl;
  std::shared_ptr<Impl> impl_;
};

}  // namespace lyapcast
