#include "ingest_client.h"

#include <arpa/inet.h>
#include <fmt/format.h>
#include <netdb.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <poll.h>
#include <sys/socket.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>

namespace lyapcast::cli {

IngestClient::~IngestClient() {
  if (fd_ >= 0) ::close(fd_);
}

Status IngestClient::Connect(const std::string& endpoint, const std::string& token, int window) {
  const auto colon = endpoint.rfind(':');
  if (colon == std::string::npos) return Status::Invalid(fmt::format("'{}' is not host:port", endpoint));
  std::string host = endpoint.substr(0, colon);
  if (host.size() > 2 && host.front() == '[' && host.back() == ']') host = host.substr(1, host.size() - 2);
  const std::string port = endpoint.substr(colon + 1);
  addrinfo hints{};
  hints.ai_socktype = SOCK_STREAM;
  addrinfo* res = nullptr;
  if (const int rc = ::getaddrinfo(host.c_str(), port.c_str(), &hints, &res); rc != 0) {
    return Status::Invalid(fmt::format("cannot resolve {}: {}", endpoint, ::gai_strerror(rc)));
  }
  int fd = -1;
  int last_errno = 0;
  for (addrinfo* a = res; a != nullptr && fd < 0; a = a->ai_next) {
    fd = ::socket(a->ai_family, a->ai_socktype, a->ai_protocol);
    if (fd >= 0 && ::connect(fd, a->ai_addr, a->ai_addrlen) != 0) {
      last_errno = errno;
      ::close(fd);
      fd = -1;
    }
  }
  ::freeaddrinfo(res);
  if (fd < 0) return Status::Io(fmt::format("cannot connect to {}: {}", endpoint, std::strerror(last_errno)));
  int one = 1;
  ::setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
  fd_ = fd;
  window_ = window > 0 ? window : 1;
  if (!token.empty()) {
    out_ = "auth " + token + "\n";
    authenticating_ = true;
    while (replies_ == 0) {
      if (Status s = Pump(true); !s.ok()) return s;
    }
    authenticating_ = false;
    if (accepted_ != 0 || rejected_ != 0) return Status::Invalid("the daemon refused the ingest token");
    replies_ = 0;
  }
  return Status::Ok();
}

Status IngestClient::Send(const std::string& line) {
  out_ += line;
  out_ += '\n';
  ++sent_;
  while (sent_ - replies_ >= window_ || out_.size() - out_pos_ > (1 << 16)) {
    if (Status s = Pump(sent_ - replies_ >= window_); !s.ok()) return s;
  }
  return Status::Ok();
}

Status IngestClient::Flush() {
  while (out_pos_ < out_.size()) {
    if (Status s = Pump(false); !s.ok()) return s;
  }
  return Status::Ok();
}

Status IngestClient::Finish() {
  while (out_pos_ < out_.size()) {
    if (Status s = Pump(false); !s.ok()) return s;
  }
  ::shutdown(fd_, SHUT_WR);
  while (replies_ < sent_) {
    if (Status s = Pump(true); !s.ok()) return s;
  }
  return Status::Ok();
}

Status IngestClient::Pump(bool wait_for_reply) {
  pollfd p{fd_, static_cast<short>(POLLIN | (out_pos_ < out_.size() ? POLLOUT : 0)), 0};
  const int ready = ::poll(&p, 1, wait_for_reply || out_pos_ < out_.size() ? 60'000 : 0);
  if (ready < 0 && errno != EINTR) return Status::Io(fmt::format("poll: {}", std::strerror(errno)));
  if (ready == 0 && wait_for_reply) return Status::Unavailable("no reply from the daemon for 60 s");
  if (p.revents & POLLOUT) {
    const ssize_t n = ::send(fd_, out_.data() + out_pos_, out_.size() - out_pos_, MSG_NOSIGNAL);
    if (n < 0 && errno != EAGAIN && errno != EINTR) return Status::Io(fmt::format("send: {}", std::strerror(errno)));
    if (n > 0) out_pos_ += static_cast<std::size_t>(n);
    if (out_pos_ == out_.size()) {
      out_.clear();
      out_pos_ = 0;
    }
  }
  if (p.revents & (POLLIN | POLLHUP | POLLERR)) {
    char buf[65536];
    const ssize_t n = ::recv(fd_, buf, sizeof buf, 0);
    if (n < 0 && errno != EAGAIN && errno != EINTR) return Status::Io(fmt::format("recv: {}", std::strerror(errno)));
    if (n == 0) {
      return replies_ >= sent_ ? Status::Ok()
                               : Status::Unavailable(fmt::format("the daemon closed the connection after {} of {} replies",
                                                                 replies_, sent_));
    }
    in_.append(buf, static_cast<std::size_t>(n));
    std::size_t start = 0;
    for (std::size_t nl; (nl = in_.find('\n', start)) != std::string::npos; start = nl + 1) {
      OnReply(in_.substr(start, nl - start));
    }
    in_.erase(0, start);
  }
  return Status::Ok();
}

void IngestClient::OnReply(const std::string& reply) {
  ++replies_;
  if (on_reply_ && !authenticating_) on_reply_(reply);
  if (reply.rfind("ok", 0) == 0) {
    if (reply != "ok auth") ++accepted_;
    return;
  }
  ++rejected_;
  // "error <line> <code> <text>"
  const auto a = reply.find(' ');
  const auto b = a == std::string::npos ? a : reply.find(' ', a + 1);
  const auto c = b == std::string::npos ? b : reply.find(' ', b + 1);
  const std::string code = b == std::string::npos ? "?" : reply.substr(b + 1, c == std::string::npos ? c : c - b - 1);
  if (by_code_[code]++ == 0) first_errors_.push_back(reply);
}

}  // namespace lyapcast::cli
