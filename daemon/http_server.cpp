#include <utility>  // before Asio/Beast: Boost 1.74 needs std::exchange (DEVELOPERS.md "Pitfalls")

#include "http_server.h"
#include "listen.h"

#include <spdlog/spdlog.h>

#include <boost/asio.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <chrono>
#include <iterator>
#include <limits>
#include <mutex>
#include <optional>
#include <unordered_set>

namespace lyapcast {

namespace asio = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using asio::ip::tcp;

namespace {

int HexValue(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}

// Percent-decoding (RFC 3986); '+' means space in query strings.
std::string Decode(std::string_view s, bool plus_is_space) {
  std::string out;
  out.reserve(s.size());
  for (std::size_t i = 0; i < s.size(); ++i) {
    if (s[i] == '%' && i + 2 < s.size() && HexValue(s[i + 1]) >= 0 && HexValue(s[i + 2]) >= 0) {
      out += static_cast<char>(HexValue(s[i + 1]) * 16 + HexValue(s[i + 2]));
      i += 2;
    } else if (plus_is_space && s[i] == '+') {
      out += ' ';
    } else {
      out += s[i];
    }
  }
  return out;
}

HttpRequest ToPlain(const http::request<http::string_body>& req) {
  HttpRequest out;
  out.method = std::string(req.method_string());
  const std::string_view target(req.target().data(), req.target().size());
  const auto q = target.find('?');
  out.path = Decode(target.substr(0, q), false);
  if (q != std::string_view::npos) {
    std::string_view rest = target.substr(q + 1);
    while (!rest.empty()) {
      const auto amp = rest.find('&');
      const std::string_view pair = rest.substr(0, amp);
      const auto eq = pair.find('=');
      if (!pair.empty()) {
        out.query[Decode(pair.substr(0, eq), true)] =
            eq == std::string_view::npos ? std::string() : Decode(pair.substr(eq + 1), true);
      }
      if (amp == std::string_view::npos) break;
      rest = rest.substr(amp + 1);
    }
  }
  if (auto it = req.find(http::field::authorization); it != req.end()) out.authorization = std::string(it->value());
  if (auto it = req.find(http::field::accept); it != req.end()) out.accept = std::string(it->value());
  out.body = req.body();
  return out;
}

std::string ErrorJson(std::string_view code, std::string_view message) {
  // Codes and messages here are fixed ASCII without quotes or backslashes.
  return fmt::format(R"({{"error":{{"code":"{}","message":"{}"}}}})", code, message);
}

}  // namespace

struct HttpServer::Impl : std::enable_shared_from_this<HttpServer::Impl> {
  class Session;
  Impl(asio::io_context& io_, HttpServerOptions options_, HttpHandler handler_)
      : io(io_), options(std::move(options_)), handler(std::move(handler_)), acceptor(io_) {}
  void Accept();

  asio::io_context& io;
  const HttpServerOptions options;
  const HttpHandler handler;
  tcp::acceptor acceptor;
  std::mutex mu;
  std::unordered_set<std::shared_ptr<Session>> sessions;
  bool stopping = false;
};

class HttpServer::Impl::Session : public std::enable_shared_from_this<Session> {
 public:
  Session(std::shared_ptr<Impl> server, tcp::socket socket) : server_(std::move(server)), stream_(std::move(socket)) {}

  void Start() {
    asio::dispatch(stream_.get_executor(), [self = shared_from_this()] { self->DoRead(); });
  }

  void Close() {
    asio::dispatch(stream_.get_executor(), [self = shared_from_this()] {
      if (self->busy_) {
        self->close_after_response_ = true;
        return;
      }
      self->Finish();
    });
  }

 private:
  // Headers first: the head handler may answer at once or allow a larger
  // body for this request. The body limit is the largest possible while the
  // headers are parsed (Beast checks Content-Length against it at the end of
  // the headers; boost::none would fail every Content-Length there) and is
  // set, and Content-Length checked, before the body is read.
  void DoRead() {
    parser_.emplace();
    parser_->body_limit(std::numeric_limits<std::uint64_t>::max());
    parser_->header_limit(server_->options.max_header);
    body_limit_ = server_->options.max_body;
    // The first request may take read_timeout; later ones wait keep_alive idle.
    stream_.expires_after(std::chrono::microseconds(requests_ == 0 ? server_->options.read_timeout
                                                                   : server_->options.keep_alive));
    http::async_read_header(stream_, buffer_, *parser_,
                            [self = shared_from_this()](beast::error_code ec, std::size_t) { self->OnHeader(ec); });
  }

  // True when `ec` ended the request (the connection finishes or an error is sent).
  bool ReadFailed(beast::error_code ec) {
    if (ec == http::error::end_of_stream || ec == beast::error::timeout || ec == asio::error::operation_aborted) {
      Finish();
      return true;
    }
    if (ec == http::error::body_limit) {
      SendError(http::status::payload_too_large, "body-too-large",
                fmt::format("request body exceeds {} bytes", body_limit_));
      return true;
    }
    if (ec == http::error::header_limit) {
      SendError(http::status::request_header_fields_too_large, "headers-too-large",
                fmt::format("request line and headers exceed {} bytes", server_->options.max_header));
      return true;
    }
    if (ec) {
      SendError(http::status::bad_request, "bad-request", "malformed HTTP request");
      return true;
    }
    return false;
  }

  void OnHeader(beast::error_code ec) {
    if (ReadFailed(ec)) return;
    const auto& req = parser_->get();
    // The byte limit already bounds memory; the field count bounds the work
    // of a request made of many tiny headers.
    if (static_cast<std::size_t>(std::distance(req.begin(), req.end())) > server_->options.max_header_fields) {
      return SendError(http::status::request_header_fields_too_large, "too-many-headers",
                       fmt::format("more than {} header fields", server_->options.max_header_fields));
    }
    if (server_->options.head) {
      HeadDecision d = server_->options.head(ToPlain(req));
      if (d.respond) {
        ++requests_;
        close_after_response_ = true;  // the body (if any) is never read
        return Respond(std::move(*d.respond), req.version(), false, req.method() == http::verb::head);
      }
      if (d.body_limit > 0) body_limit_ = d.body_limit;
    }
    if (const auto length = parser_->content_length(); length && *length > body_limit_) {
      return SendError(http::status::payload_too_large, "body-too-large",
                       fmt::format("request body exceeds {} bytes", body_limit_));
    }
    parser_->body_limit(body_limit_);  // chunked bodies are checked as they arrive
    if (requests_ > 0) stream_.expires_after(std::chrono::microseconds(server_->options.read_timeout));
    if (parser_->is_done()) return OnRead({});
    // A client that waits for "100 Continue" before a large body (curl does
    // above 1 MiB) gets it now that the headers passed.
    if (const auto expect = req.find(http::field::expect);
        expect != req.end() && beast::iequals(expect->value(), "100-continue")) {
      auto cont = std::make_shared<http::response<http::empty_body>>(http::status::continue_, req.version());
      return http::async_write(stream_, *cont, [self = shared_from_this(), cont](beast::error_code ec, std::size_t) {
        if (ec) return self->Finish();
        self->ReadBody();
      });
    }
    ReadBody();
  }

  void ReadBody() {
    http::async_read(stream_, buffer_, *parser_,
                     [self = shared_from_this()](beast::error_code ec, std::size_t) { self->OnRead(ec); });
  }

  void OnRead(beast::error_code ec) {
    if (ReadFailed(ec)) return;
    const auto& req = parser_->get();
    ++requests_;
    HttpResponse plain = server_->handler(ToPlain(req));
    Respond(std::move(plain), req.version(), req.keep_alive(), req.method() == http::verb::head);
  }

  void Respond(HttpResponse plain, unsigned version, bool keep_alive, bool head_method) {
    busy_ = true;
    auto res = std::make_shared<http::response<http::string_body>>(static_cast<http::status>(plain.status), version);
    res->set(http::field::server, "lyapcast");
    res->set(http::field::content_type, plain.content_type);
    res->set(http::field::cache_control, "no-store");
    for (auto& [k, v] : plain.headers) res->set(k, v);
    res->keep_alive(keep_alive && !close_after_response_);
    res->body() = std::move(plain.body);
    res->prepare_payload();
    if (head_method) {
      // HEAD: the GET answer's headers (Content-Length included), no body;
      // a body here would be read as the start of the next response.
      const auto length = res->body().size();
      res->body().clear();
      res->content_length(length);
    }
    Write(std::move(res));
  }

  void SendError(http::status status, std::string_view code, const std::string& message) {
    auto res = std::make_shared<http::response<http::string_body>>(status, 11);
    res->set(http::field::server, "lyapcast");
    res->set(http::field::content_type, "application/json");
    res->keep_alive(false);
    res->body() = ErrorJson(code, message);
    res->prepare_payload();
    busy_ = true;
    Write(std::move(res));
  }

  void Write(std::shared_ptr<http::response<http::string_body>> res) {
    stream_.expires_after(std::chrono::microseconds(server_->options.write_timeout));
    http::async_write(stream_, *res, [self = shared_from_this(), res](beast::error_code ec, std::size_t) {
      self->busy_ = false;
      if (ec || !res->keep_alive() || self->close_after_response_) return self->Finish();
      self->DoRead();
    });
  }

  void Finish() {
    if (finished_) return;
    finished_ = true;
    beast::error_code ec;
    stream_.socket().shutdown(tcp::socket::shutdown_send, ec);
    stream_.close();
    std::lock_guard lock(server_->mu);
    server_->sessions.erase(shared_from_this());
  }

  std::shared_ptr<Impl> server_;
  beast::tcp_stream stream_;
  beast::flat_buffer buffer_;
  std::optional<http::request_parser<http::string_body>> parser_;
  std::uint64_t body_limit_ = 0;  // of the request being read
  std::uint64_t requests_ = 0;
  bool busy_ = false, close_after_response_ = false, finished_ = false;
};

void HttpServer::Impl::Accept() {
  acceptor.async_accept(asio::make_strand(io), [self = shared_from_this()](beast::error_code ec, tcp::socket socket) {
    if (ec == asio::error::operation_aborted) return;
    if (ec) {
      spdlog::warn("http: accept failed: {}", ec.message());
    } else {
      std::unique_lock lock(self->mu);
      if (self->stopping) return;
      if (static_cast<int>(self->sessions.size()) >= self->options.max_connections) {
        lock.unlock();
        spdlog::warn("http: refusing a connection: {} connections open", self->options.max_connections);
        beast::error_code ignored;
        socket.close(ignored);
      } else {
        auto session = std::make_shared<Session>(self, std::move(socket));
        self->sessions.insert(session);
        lock.unlock();
        session->Start();
      }
    }
    self->Accept();
  });
}

HttpServer::HttpServer(asio::io_context& io, HttpServerOptions options, HttpHandler handler)
    : impl_(std::make_shared<Impl>(io, std::move(options), std::move(handler))) {}

HttpServer::~HttpServer() = default;

Status HttpServer::Listen() { return BindAndListen(impl_->acceptor, impl_->options.endpoint, "listen.http"); }

std::uint16_t HttpServer::port() const {
  beast::error_code ec;
  const auto ep = impl_->acceptor.local_endpoint(ec);
  return ec ? 0 : ep.port();
}

void HttpServer::StartAccepting() { impl_->Accept(); }

void HttpServer::Shutdown() {
  std::vector<std::shared_ptr<Impl::Session>> live;
  {
    std::lock_guard lock(impl_->mu);
    impl_->stopping = true;
    live.assign(impl_->sessions.begin(), impl_->sessions.end());
  }
  beast::error_code ec;
  impl_->acceptor.close(ec);
  for (auto& s : live) s->Close();
}

}  // namespace lyapcast
