// IngestClient: a TCP client for the daemon's ingest port that keeps up to
// `window` lines in flight and tallies the replies (`ok <n>` / `error <line>
// <code> <text>`). Used by `lyapcast simulate --send`, `replay` and `import`.
// Single-threaded: Send() reads replies whenever the window is full.
#pragma once

#include <cstdint>
#include <functional>
#include <map>
#include <string>
#include <vector>

#include "core/status.h"

namespace lyapcast::cli {

class IngestClient {
 public:
  IngestClient() = default;
  ~IngestClient();
  IngestClient(const IngestClient&) = delete;
  IngestClient& operator=(const IngestClient&) = delete;

  // Called with each reply to a sent line, in the order the lines were sent
  // (the daemon answers every line once, in order), on the caller's thread
  // from inside Send(), Flush() or Finish(). Set it before Connect().
  using ReplyHandler = std::function<void(const std::string& reply)>;
  void set_reply_handler(ReplyHandler handler) { on_reply_ = std::move(handler); }

  // host:port, e.g. "127.0.0.1:7301". With a token, sends `auth <token>` first.
  [[nodiscard]] Status Connect(const std::string& endpoint, const std::string& token = {}, int window = 1000);
  // Queues one line (without newline). Blocks while `window` lines await replies.
  [[nodiscard]] Status Send(const std::string& line);
  // Writes every queued byte now (a paced sender calls it after each line,
  // so samples reach the daemon when they are due, not when a buffer fills).
  [[nodiscard]] Status Flush();
  // Sends what is queued, half-closes, and reads every remaining reply.
  [[nodiscard]] Status Finish();

  std::int64_t sent() const { return sent_; }
  std::int64_t accepted() const { return accepted_; }
  std::int64_t rejected() const { return rejected_; }
  // Rejections by code, and the first reply of each code.
  const std::map<std::string, std::int64_t>& rejected_by_code() const { return by_code_; }
  const std::vector<std::string>& first_errors() const { return first_errors_; }

 private:
  Status Pump(bool wait_for_reply);  // writes pending bytes, reads replies
  void OnReply(const std::string& reply);

  int fd_ = -1;
  int window_ = 1000;
  std::string out_;
  std::size_t out_pos_ = 0;
  std::string in_;
  std::int64_t sent_ = 0, replies_ = 0, accepted_ = 0, rejected_ = 0;
  std::map<std::string, std::int64_t> by_code_;
  std::vector<std::string> first_errors_;
  ReplyHandler on_reply_;
  bool authenticating_ = false;
};

}  // namespace lyapcast::cli
