#include <utility>  // before Asio: Boost 1.74 needs std::exchange (PITFALLS.md)

#include "ingest_server.h"
#include "listen.h"

#include <spdlog/spdlog.h>

#include <boost/asio.hpp>
#include <chrono>
#include <mutex>
#include <unordered_set>
#include <vector>

#include "ingest/line_session.h"
#include "store/sample_writer.h"

namespace lyapcast {

namespace asio = boost::asio;
using asio::ip::tcp;

namespace {

constexpr std::size_t kReadChunk = 64 * 1024;

LineSessionOptions SessionOptions(const IngestServerOptions& o) {
  LineSessionOptions s;
  s.max_line = o.max_line;
  s.max_future_skew = o.max_future_skew;
  s.token = o.token;
  s.max_outstanding = o.max_outstanding;
  s.max_pending_output = o.max_pending_output;
  return s;
}

}  // namespace

struct IngestServer::Impl : std::enable_shared_from_this<IngestServer::Impl> {
  class Session;

  Impl(asio::io_context& io_, const Config& config_, SampleWriter& writer_, IngestServerOptions options_)
      : io(io_),
        config(config_),
        writer(writer_),
        options(std::move(options_)),
        session_options(SessionOptions(options)),
        acceptor(io_),
        grace_timer(io_) {}

  void Accept();
  void Forget(Session* s);
  void MaybeFinishShutdown();

  asio::io_context& io;
  const Config& config;
  SampleWriter& writer;
  const IngestServerOptions options;
  const LineSessionOptions session_options;
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

// One TCP connection: socket reads and writes, the idle timer and closing,
// around a LineSession that does the protocol. Everything runs on strand_;
// the session is also the LineSession's sink (over the SampleWriter), and
// posts each writer completion back to strand_. A completion holds a
// shared_ptr to the session, so the LineSession outlives every ticket.
class IngestServer::Impl::Session : public std::enable_shared_from_this<Session>, public SampleSink {
 public:
  Session(std::shared_ptr<Impl> server, tcp::socket socket, std::string peer)
      : server_(std::move(server)),
        socket_(std::move(socket)),
        strand_(socket_.get_executor()),
        idle_timer_(strand_),
        peer_(std::move(peer)),
        lines_(server_->config, *this, server_->counters, server_->session_options) {
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
    asio::dispatch(strand_, [self = shared_from_this()] { self->StopReading(); });
  }

  void ForceClose() {
    asio::dispatch(strand_, [self = shared_from_this()] { self->Close(); });
  }

  // SampleSink: called by lines_ on strand_.
  bool Submit(std::vector<FeedSample> samples, SubmissionTicket ticket) override {
    return server_->writer.Submit(std::move(samples), [self = shared_from_this(), ticket](
                                                          std::vector<WriteOutcome> outcomes) mutable {
      asio::strand<asio::any_io_executor>& strand = self->strand_;
      asio::post(strand, [self = std::move(self), ticket, outcomes = std::move(outcomes)]() mutable {
        self->lines_.Complete(ticket, std::move(outcomes));
        self->Pump();
      });
    });
  }

 private:
  void ArmIdleTimer() {
    idle_timer_.expires_after(std::chrono::microseconds(server_->options.idle_timeout));
    idle_timer_.async_wait([self = shared_from_this()](boost::system::error_code ec) {
      if (ec || self->closed_) return;
      if (self->idle_timer_.expiry() > asio::steady_timer::clock_type::now()) return;  // re-armed
      spdlog::info("ingest: closing idle connection from {} after {}", self->peer_, FormatDuration(self->server_->options.idle_timeout));
      self->StopReading();
    });
  }

  // Cancels a pending read; replies still flow. The bytes of a read that
  // completed before the cancel were received and still get answered, so the
  // session's input ends only when no read is in flight.
  void StopReading() {
    draining_ = true;
    boost::system::error_code ec;
    socket_.cancel(ec);
    if (!reading_) lines_.StopInput();
    Pump();
  }

  // After every event: send what is ready, read if the session wants input
  // (backpressure), close when everything is answered.
  void Pump() {
    DoWrite();
    DoRead();
    MaybeClose();
  }

  void DoRead() {
    if (reading_ || draining_ || closed_ || !lines_.WantsInput()) return;
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
      lines_.Consume(std::string_view(read_buf_.data(), n));
    }
    if (ec == asio::error::eof) {
      lines_.EndInput();  // an unterminated last line still counts
    } else if (ec && ec != asio::error::operation_aborted) {
      spdlog::debug("ingest: read from {} failed: {}", peer_, ec.message());
      Close();
      return;
    }
    if (draining_) lines_.StopInput();
    LogAuthFailure();
    Pump();
  }

  void LogAuthFailure() {
    if (auth_logged_ || lines_.auth_failure() == LineSession::AuthFailure::kNone) return;
    auth_logged_ = true;
    if (lines_.auth_failure() == LineSession::AuthFailure::kWrongToken) {
      spdlog::warn("ingest: connection from {} sent a wrong ingest token; closing", peer_);
    } else {
      spdlog::warn("ingest: connection from {} did not authenticate; closing", peer_);
    }
  }

  void DoWrite() {
    if (writing_ || closed_ || !lines_.HasReplies()) return;
    writing_ = true;
    lines_.TakeReplies(writing_buf_);
    asio::async_write(socket_, asio::buffer(writing_buf_),
                      asio::bind_executor(strand_, [self = shared_from_this()](boost::system::error_code ec, std::size_t) {
                        self->writing_ = false;
                        self->lines_.RepliesSent(self->writing_buf_.size());
                        self->writing_buf_.clear();
                        if (ec) {
                          if (!self->closed_) spdlog::debug("ingest: write to {} failed: {}", self->peer_, ec.message());
                          self->Close();
                          return;
                        }
                        self->Pump();
                      }));
  }

  void MaybeClose() {
    if (closed_ || reading_ || writing_ || !lines_.Finished()) return;
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

  std::shared_ptr<Impl> server_;
  tcp::socket socket_;
  asio::strand<asio::any_io_executor> strand_;
  asio::steady_timer idle_timer_;
  const std::string peer_;
  LineSession lines_;
  std::vector<char> read_buf_;
  std::string writing_buf_;  // the replies being written; swapped with the session's buffer
  bool reading_ = false, writing_ = false, draining_ = false, closed_ = false, auth_logged_ = false;
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
        auto session = std::make_shared<Session>(self, std::move(socket), peer);
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
