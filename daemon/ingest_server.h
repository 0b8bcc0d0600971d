// IngestServer: the TCP listener for sample lines (docs/protocol.md). Each
// connection is a thin TCP adapter over a LineSession
// (lib/ingest/line_session.h), which frames, authenticates, parses, submits
// to the SampleWriter and answers every line exactly once, in order: `ok <n>`
// after its transaction committed, or `error <line> <code> <text>`. The
// adapter reads the socket, writes the replies, runs the idle timer and
// closes.
//
// Backpressure: a connection stops reading its socket while its session has
// more than `max_outstanding` samples awaiting commit or more than
// `max_pending_output` bytes of replies the client has not read yet; TCP
// then slows the sender. Nothing is dropped.
//
// Threads: all calls on the io_context's threads (the constructor and
// Listen() before io_context::run). Each connection and its LineSession run
// on their own strand; writer completions are posted back to it.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <string>

#include "config/config.h"
#include "core/reject_reason.h"
#include "core/status.h"
#include "ingest/ingest_counters.h"
#include "ingest/line_session.h"  // LineSessionOptions: the backpressure defaults

namespace boost::asio {
class io_context;
}

namespace lyapcast {

class SampleWriter;

struct IngestServerOptions {
  Endpoint endpoint;
  // The config's limits (config/config.h) and the session's backpressure
  // bounds (ingest/line_session.h) unless the daemon sets them.
  std::size_t max_line = LimitsConfig{}.max_line;
  int max_connections = LimitsConfig{}.max_connections;
  Micros idle_timeout = LimitsConfig{}.idle_timeout;
  Micros max_future_skew = LimitsConfig{}.max_future_skew;
  std::optional<std::string> token;  // required `auth <token>` first line when set
  std::size_t max_outstanding = LineSessionOptions{}.max_outstanding;        // samples awaiting commit
  std::size_t max_pending_output = LineSessionOptions{}.max_pending_output;  // reply bytes not yet sent
  Micros shutdown_grace = 10 * kSecond;  // then remaining sessions are closed
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
