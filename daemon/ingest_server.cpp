#include <utility>  // before Asio: Boost 1.74 needs std::exchange (DEVELOPERS.md "Pitfalls")

#include "ingest_server.h"
#include "listen.h"

#include <spdlog/spdlog.h>

#include <boost/asio.hpp>
#include <chrono>
#include <cstring>
#include <deque>
#include <mutex>
#include <unordered_set>
#include <vector>

#include "ingest/line_parser.h"
#include "store/sample_writer.h"
#include "core/secret.h"
#include "core/wall_clock.h"

namespace lyapcast {

namespace asio = boost::asio;
using asio::ip::tcp;

namespace {

constexpr std::size_t kReadChunk = 64 * 1024;

// One reply line owed to the client, in input order.
struct ReplySlot {
  std::uint64_t line = 0;
  bool ready = false;   // false: waiting for the commit outcome
  bool accepted = false;
  std::string error;    // "<code> <text>" when !accepted
};

std::string RejectText(RejectReason reason, std::string_view message) {
  std::string s(RejectCode(reason));
  s += ' ';
  s += message;
  return s;
}

}  // namespace

struct IngestServer::Impl : std::enable_shared_from_this<IngestServer::Impl> {
  class Session;

  Impl(asio::io_context& io_, const Config& config_, SampleWriter& writer_, IngestServerOptions options_)
      : io(io_), config(config_), writer(writer_), options(std::move(options_)), acceptor(io_), grace_timer(io_) {}

  void Accept();
  void Forget(Session* s);
  void MaybeFinishShutdown();

  asio::io_context& io;
  const Config& config;
  SampleWriter& writer;
  const IngestServerOptions options;
  tcp::acceptor acceptor;
  asio::steady_timer grace_timer;
  IngestCounters counters;

  std::mutex mu;                              // guards sessions, shutdown state
  std::unordered_set<Session*> sessions;      // live sessions (owned by their own shared_ptrs)
  std::vector<std::weak_ptr<Session>> weak_sessions_snapshot;
  bool shutting_down = false;
  std::function<void()> shutdown_done;
  std::atomic<int> active{0};
};

class IngestServer::Impl::Session : public std::enable_shared_from_this<Session> {
 public:
  Session(std::shared_ptr<Impl> server, tcp::socket socket)
      : server_(std::move(server)),
        socket_(std::move(socket)),
        strand_(socket_.get_executor()),
        idle_timer_(strand_),
        parser_(server_->config, server_->options.max_future_skew),
        authed_(!server_->options.token.has_value()) {
    read_buf_.resize(kReadChunk);
  }

  void Start() {
    asio::dispatch(strand_, [self = shared_from_this()] {
      self->ArmIdleTimer();
      self->DoRead();
    });
  }

  // Stop reading; finish and answer what was received, then close.
  void Drain() {
    asio::dispatch(strand_, [self = shared_from_this()] {
      self->draining_ = true;
      boost::system::error_code ec;
      self->socket_.cancel(ec);  // aborts a pending read; replies still flow
      self->MaybeClose();
    });
  }

  void ForceClose() {
    asio::dispatch(strand_, [self = shared_from_this()] { self->Close(); });
  }

 private:
  void ArmIdleTimer() {
    idle_timer_.expires_after(std::chrono::microseconds(server_->options.idle_timeout));
    idle_timer_.async_wait([self = shared_from_this()](boost::system::error_code ec) {
      if (ec || self->closed_) return;
      if (self->idle_timer_.expiry() > asio::steady_timer::clock_type::now()) return;  // re-armed
      spdlog::info("ingest: closing idle connection from {} after {}", self->peer_, FormatDuration(self->server_->options.idle_timeout));
      self->draining_ = true;
      boost::system::error_code ignored;
      self->socket_.cancel(ignored);
      self->MaybeClose();
    });
  }

  void DoRead() {
    if (reading_ || draining_ || closed_ || eof_ || close_after_flush_) return;
    if (outstanding_ > server_->options.max_outstanding || PendingOutput() > server_->options.max_pending_output) {
      return;  // backpressure: resumed from OnCommitted / OnWritten
    }
    reading_ = true;
    socket_.async_read_some(asio::buffer(read_buf_), asio::bind_executor(strand_, [self = shared_from_this()](
                                                                                       boost::system::error_code ec,
                                                                                       std::size_t n) {
                              self->reading_ = false;
                              self->OnRead(ec, n);
                            }));
  }

  void OnRead(boost::system::error_code ec, std::size_t n) {
    if (closed_) return;
    if (n > 0) {
      ArmIdleTimer();
      Consume(read_buf_.data(), n);
    }
    if (ec == asio::error::eof) {
      // The client finished sending. An unterminated last line still counts.
      eof_ = true;
      if (!partial_.empty() && !skipping_) HandleLine(partial_);
      partial_.clear();
      SubmitBatch();
      MaybeClose();
      return;
    }
    if (ec == asio::error::operation_aborted) {
      MaybeClose();
      return;
    }
    if (ec) {
      spdlog::debug("ingest: read from {} failed: {}", peer_, ec.message());
      Close();
      return;
    }
    SubmitBatch();
    Flush();
    DoRead();
  }

  // Splits bytes into lines; a line longer than max_line is answered
  // line-too-long once and its remaining bytes are skipped up to the newline.
  void Consume(const char* p, std::size_t n) {
    const char* end = p + n;
    const std::size_t max_line = server_->options.max_line;
    while (p < end && !close_after_flush_) {
      const char* nl = static_cast<const char*>(std::memchr(p, '\n', static_cast<std::size_t>(end - p)));
      if (skipping_) {
        if (nl == nullptr) return;
        skipping_ = false;
        p = nl + 1;
        continue;
      }
      if (nl == nullptr) {
        // +1 leaves room for a '\r' that belongs to the line ending.
        if (partial_.size() + static_cast<std::size_t>(end - p) > max_line + 1) {
          partial_.clear();
          skipping_ = true;
          RejectTooLong();
          return;
        }
        partial_.append(p, end);
        return;
      }
      if (!partial_.empty()) {
        partial_.append(p, nl);
        HandleLine(partial_);
        partial_.clear();
      } else {
        HandleLine(std::string_view(p, static_cast<std::size_t>(nl - p)));
      }
      p = nl + 1;
    }
  }

  void RejectTooLong() {
    const std::uint64_t line = ++line_no_;
    server_->counters.lines.fetch_add(1, std::memory_order_relaxed);
    AddReject(line, RejectReason::kLineTooLong,
              fmt::format("line exceeds {} bytes (limits.max_line); the rest of it is skipped", server_->options.max_line));
  }

  void HandleLine(std::string_view line) {
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (line.size() > server_->options.max_line) {
      RejectTooLong();
      return;
    }
    const std::uint64_t line_no = ++line_no_;
    server_->counters.lines.fetch_add(1, std::memory_order_relaxed);
    if (wall_now_ == WallTime{}) wall_now_ = WallNow();
    ParsedLine parsed = parser_.Parse(line, wall_now_);
    switch (parsed.kind) {
      case ParsedLine::Kind::kAuth:
        HandleAuth(line_no, parsed.token);
        return;
      case ParsedLine::Kind::kReject:
        if (!authed_) return RejectUnauthenticated(line_no);
        AddReject(line_no, parsed.reason, parsed.message);
        return;
      case ParsedLine::Kind::kSample:
        if (!authed_) return RejectUnauthenticated(line_no);
        batch_.push_back(std::move(parsed.sample));
        slots_.push_back(ReplySlot{line_no, false, false, {}});
        return;
    }
  }

  void HandleAuth(std::uint64_t line_no, const std::string& token) {
    const auto& expected = server_->options.token;
    if (!expected || (line_no == 1 && ConstantTimeEquals(token, *expected)) || (authed_ && token == *expected)) {
      authed_ = true;
      AddReady(line_no, "ok auth");
      return;
    }
    spdlog::warn("ingest: connection from {} sent a wrong ingest token; closing", peer_);
    AddReject(line_no, RejectReason::kBadAuth, "wrong ingest token");
    close_after_flush_ = true;
  }

  void RejectUnauthenticated(std::uint64_t line_no) {
    spdlog::warn("ingest: connection from {} did not authenticate; closing", peer_);
    AddReject(line_no, RejectReason::kBadAuth, "this server requires 'auth <token>' as the first line");
    close_after_flush_ = true;
  }

  void AddReject(std::uint64_t line_no, RejectReason reason, std::string_view message) {
    server_->counters.rejected[static_cast<int>(reason)].fetch_add(1, std::memory_order_relaxed);
    slots_.push_back(ReplySlot{line_no, true, false, RejectText(reason, message)});
  }

  void AddReady(std::uint64_t line_no, std::string text) {
    ReplySlot slot{line_no, true, true, std::move(text)};
    slots_.push_back(std::move(slot));
  }

  void SubmitBatch() {
    wall_now_ = WallTime{};
    if (batch_.empty()) {
      Flush();
      return;
    }
    const std::size_t count = batch_.size();
    outstanding_ += count;
    auto self = shared_from_this();
    const bool queued = server_->writer.Submit(std::move(batch_), [self](std::vector<WriteOutcome> outcomes) {
      asio::post(self->strand_, [self, outcomes = std::move(outcomes)] { self->OnCommitted(outcomes); });
    });
    batch_.clear();
    if (!queued) {
      std::vector<WriteOutcome> outcomes(count, WriteOutcome{false, RejectReason::kShuttingDown});
      OnCommitted(outcomes);
    }
    Flush();
  }

  // Fills the oldest waiting slots: the writer completes submissions in order.
  void OnCommitted(const std::vector<WriteOutcome>& outcomes) {
    outstanding_ -= outcomes.size();
    std::size_t i = 0;
    for (ReplySlot& slot : slots_) {
      if (i == outcomes.size()) break;
      if (slot.ready) continue;
      const WriteOutcome& o = outcomes[i++];
      slot.ready = true;
      slot.accepted = o.accepted;
      if (o.accepted) {
        server_->counters.accepted.fetch_add(1, std::memory_order_relaxed);
      } else {
        server_->counters.rejected[static_cast<int>(o.reason)].fetch_add(1, std::memory_order_relaxed);
        slot.error = RejectText(o.reason, DescribeWriteReject(o.reason));
      }
    }
    Flush();
    DoRead();
    MaybeClose();
  }

  static std::string_view DescribeWriteReject(RejectReason reason) {
    switch (reason) {
      case RejectReason::kTooOld: return "sample is older than the feed's newest sample minus storage.retention";
      case RejectReason::kDuplicateTime: return "a different sample of this feed is already stored at this time";
      case RejectReason::kStorageUnavailable: return "the store cannot commit right now (disk full or I/O error); resend later";
      case RejectReason::kShuttingDown: return "the daemon is shutting down; resend after it restarts";
      default: return "rejected by the store";
    }
  }

  // Moves ready replies from the front into the output and starts a write.
  void Flush() {
    while (!slots_.empty() && slots_.front().ready) {
      ReplySlot& slot = slots_.front();
      if (slot.accepted && slot.error.empty()) {
        out_ += "ok ";
        out_ += std::to_string(++accepted_count_);
      } else if (slot.accepted) {
        out_ += slot.error;  // e.g. "ok auth"
      } else {
        out_ += "error ";
        out_ += std::to_string(slot.line);
        out_ += ' ';
        out_ += slot.error;
      }
      out_ += '\n';
      slots_.pop_front();
    }
    DoWrite();
  }

  void DoWrite() {
    if (writing_ || out_.empty() || closed_) return;
    writing_ = true;
    writing_buf_.swap(out_);
    out_.clear();
    asio::async_write(socket_, asio::buffer(writing_buf_),
                      asio::bind_executor(strand_, [self = shared_from_this()](boost::system::error_code ec, std::size_t) {
                        self->writing_ = false;
                        self->writing_buf_.clear();
                        if (ec) {
                          if (!self->closed_) spdlog::debug("ingest: write to {} failed: {}", self->peer_, ec.message());
                          self->Close();
                          return;
                        }
                        self->DoWrite();
                        self->DoRead();
                        self->MaybeClose();
                      }));
  }

  std::size_t PendingOutput() const { return out_.size() + writing_buf_.size(); }

  void MaybeClose() {
    if (closed_) return;
    const bool input_done = draining_ || eof_ || close_after_flush_;
    if (!input_done || reading_ || outstanding_ > 0 || !slots_.empty() || writing_ || !out_.empty()) return;
    boost::system::error_code ec;
    socket_.shutdown(tcp::socket::shutdown_send, ec);
    Close();
  }

  void Close() {
    if (closed_) return;
    closed_ = true;
    boost::system::error_code ec;
    idle_timer_.cancel();
    socket_.close(ec);
    server_->Forget(this);
  }

 public:
  std::string peer_;

 private:
  std::shared_ptr<Impl> server_;
  tcp::socket socket_;
  asio::strand<asio::any_io_executor> strand_;
  asio::steady_timer idle_timer_;
  LineParser parser_;
  std::vector<char> read_buf_;
  std::string partial_;
  bool skipping_ = false;
  std::uint64_t line_no_ = 0;
  std::uint64_t accepted_count_ = 0;
  WallTime wall_now_{};
  std::vector<FeedSample> batch_;
  std::deque<ReplySlot> slots_;
  std::size_t outstanding_ = 0;
  std::string out_, writing_buf_;
  bool reading_ = false, writing_ = false, draining_ = false, eof_ = false, closed_ = false;
  bool close_after_flush_ = false;
  bool authed_;
};

void IngestServer::Impl::Accept() {
  acceptor.async_accept(asio::make_strand(io), [self = shared_from_this()](boost::system::error_code ec, tcp::socket socket) {
    if (ec == asio::error::operation_aborted) return;
    if (ec) {
      spdlog::warn("ingest: accept failed: {}", ec.message());
    } else {
      self->counters.connections_accepted.fetch_add(1, std::memory_order_relaxed);
      boost::system::error_code peer_ec;
      const auto remote = socket.remote_endpoint(peer_ec);
      const std::string peer = peer_ec ? "?" : remote.address().to_string() + ":" + std::to_string(remote.port());
      std::unique_lock lock(self->mu);
      if (self->shutting_down) return;
      if (static_cast<int>(self->sessions.size()) >= self->options.max_connections) {
        lock.unlock();
        self->counters.connections_refused.fetch_add(1, std::memory_order_relaxed);
        spdlog::warn("ingest: refusing connection from {}: limits.max_connections ({}) reached", peer,
                     self->options.max_connections);
        auto msg = std::make_shared<std::string>(fmt::format(
            "error 0 too-many-connections this server already has {} ingest connections (limits.max_connections)\n",
            self->options.max_connections));
        auto sock = std::make_shared<tcp::socket>(std::move(socket));
        asio::async_write(*sock, asio::buffer(*msg), [sock, msg](boost::system::error_code, std::size_t) {
          boost::system::error_code ignored;
          sock->shutdown(tcp::socket::shutdown_both, ignored);
          sock->close(ignored);
        });
      } else {
        auto session = std::make_shared<Session>(self, std::move(socket));
        session->peer_ = peer;
        self->sessions.insert(session.get());
        self->weak_sessions_snapshot.push_back(session);
        self->active.store(static_cast<int>(self->sessions.size()), std::memory_order_relaxed);
        lock.unlock();
        spdlog::debug("ingest: connection from {}", peer);
        session->Start();
      }
    }
    self->Accept();
  });
}

void IngestServer::Impl::Forget(Session* s) {
  std::unique_lock lock(mu);
  sessions.erase(s);
  active.store(static_cast<int>(sessions.size()), std::memory_order_relaxed);
  // Compact the weak list now and then so it does not grow with churn.
  if (weak_sessions_snapshot.size() > 2 * sessions.size() + 64) {
    std::erase_if(weak_sessions_snapshot, [](const std::weak_ptr<Session>& w) { return w.expired(); });
  }
  lock.unlock();
  MaybeFinishShutdown();
}

void IngestServer::Impl::MaybeFinishShutdown() {
  std::function<void()> done;
  {
    std::lock_guard lock(mu);
    if (!shutting_down || !sessions.empty() || !shutdown_done) return;
    done = std::move(shutdown_done);
    shutdown_done = nullptr;
  }
  grace_timer.cancel();
  asio::post(io, std::move(done));
}

IngestServer::IngestServer(asio::io_context& io, const Config& config, SampleWriter& writer, IngestServerOptions options)
    : impl_(std::make_shared<Impl>(io, config, writer, std::move(options))) {}

IngestServer::~IngestServer() = default;

Status IngestServer::Listen() { return BindAndListen(impl_->acceptor, impl_->options.endpoint, "listen.ingest"); }

std::uint16_t IngestServer::port() const {
  boost::system::error_code ec;
  const auto ep = impl_->acceptor.local_endpoint(ec);
  return ec ? 0 : ep.port();
}

void IngestServer::StartAccepting() { impl_->Accept(); }

void IngestServer::Shutdown(std::function<void()> done) {
  auto impl = impl_;
  std::vector<std::shared_ptr<Impl::Session>> live;
  {
    std::lock_guard lock(impl->mu);
    impl->shutting_down = true;
    impl->shutdown_done = std::move(done);
    for (auto& w : impl->weak_sessions_snapshot) {
      if (auto s = w.lock()) live.push_back(std::move(s));
    }
  }
  boost::system::error_code ec;
  impl->acceptor.close(ec);
  spdlog::info("ingest: stopped accepting; finishing {} open connection(s)", live.size());
  for (auto& s : live) s->Drain();
  impl->grace_timer.expires_after(std::chrono::microseconds(impl->options.shutdown_grace));
  impl->grace_timer.async_wait([impl, live = std::vector<std::weak_ptr<Impl::Session>>(live.begin(), live.end())](
                                   boost::system::error_code ec2) {
    if (ec2) return;
    spdlog::warn("ingest: closing connections still open after the shutdown grace period");
    for (auto& w : live) {
      if (auto s = w.lock()) s->ForceClose();
    }
  });
  impl->MaybeFinishShutdown();
}

const IngestCounters& IngestServer::counters() const { return impl_->counters; }

int IngestServer::active_connections() const { return impl_->active.load(std::memory_order_relaxed); }

}  // namespace lyapcast
