#include <utility>  // before Asio/Beast: Boost 1.74 needs std::exchange (DEVELOPERS.md "Pitfalls")

#include "http_client.h"

#include <fmt/format.h>

#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <cctype>
#include <chrono>
#include <optional>

namespace lyapcast::cli {

namespace asio = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using asio::ip::tcp;

namespace {

constexpr std::uint64_t kMaxBody = std::uint64_t{1} << 30;  // a 100000-step JSON forecast is ~30 MB

bool IEquals(std::string_view a, std::string_view b) {
  if (a.size() != b.size()) return false;
  for (std::size_t i = 0; i < a.size(); ++i) {
    if (std::tolower(static_cast<unsigned char>(a[i])) != std::tolower(static_cast<unsigned char>(b[i]))) return false;
  }
  return true;
}

}  // namespace

Result<HttpUrl> ParseHttpUrl(const std::string& url) {
  HttpUrl out;
  out.text = url;
  std::string rest = url;
  if (const auto scheme = rest.find("://"); scheme != std::string::npos) {
    const std::string s = rest.substr(0, scheme);
    if (IEquals(s, "https")) {
      return Status::Invalid(
          fmt::format("--url {}: https is not supported by this client; use http:// to the daemon "
                      "(on loopback, or through an SSH tunnel)",
                      url));
    }
    if (!IEquals(s, "http")) return Status::Invalid(fmt::format("--url {}: expected http://HOST:PORT", url));
    rest = rest.substr(scheme + 3);
  }
  const auto slash = rest.find('/');
  std::string authority = rest.substr(0, slash);
  if (slash != std::string::npos) {
    out.prefix = rest.substr(slash);
    while (!out.prefix.empty() && out.prefix.back() == '/') out.prefix.pop_back();
    if (out.prefix.find_first_of("?#") != std::string::npos) {
      return Status::Invalid(fmt::format("--url {}: give the daemon's base address without a query", url));
    }
  }
  if (authority.find('@') != std::string::npos) {
    return Status::Invalid(fmt::format("--url: user information in the URL is not supported; use --token-file"));
  }
  if (!authority.empty() && authority.front() == '[') {  // [::1]:7302
    const auto close = authority.find(']');
    if (close == std::string::npos) return Status::Invalid(fmt::format("--url {}: unclosed '['", url));
    out.host = authority.substr(1, close - 1);
    const std::string after = authority.substr(close + 1);
    if (!after.empty()) {
      if (after.front() != ':') return Status::Invalid(fmt::format("--url {}: expected ':PORT' after ']'", url));
      out.port = after.substr(1);
    }
  } else {
    const auto colon = authority.rfind(':');
    out.host = authority.substr(0, colon);
    if (colon != std::string::npos) out.port = authority.substr(colon + 1);
  }
  if (out.port.empty()) out.port = "80";
  if (out.host.empty()) return Status::Invalid(fmt::format("--url {}: no host; expected http://HOST:PORT", url));
  if (out.port.find_first_not_of("0123456789") != std::string::npos || out.port.size() > 5 ||
      std::stoi(out.port) > 65535) {
    return Status::Invalid(fmt::format("--url {}: '{}' is not a port number", url, out.port));
  }
  return out;
}

std::string UrlEncode(const std::string& text) {
  std::string out;
  for (const char ch : text) {
    const auto c = static_cast<unsigned char>(ch);
    if (std::isalnum(c) || c == '-' || c == '_' || c == '.' || c == '~') {
      out += ch;
    } else {
      out += fmt::format("%{:02X}", static_cast<unsigned>(c));
    }
  }
  return out;
}

std::string HttpClientResponse::Header(const std::string& name) const {
  for (const auto& [k, v] : headers) {
    if (IEquals(k, name)) return v;
  }
  return "";
}

struct HttpClient::Impl {
  asio::io_context ioc;
  std::optional<beast::tcp_stream> stream;
  beast::flat_buffer buffer;
  int exchanges = 0;  // on the current connection

  void Close() {
    if (stream) {
      beast::error_code ignored;
      stream->socket().shutdown(tcp::socket::shutdown_both, ignored);
      stream->close();
    }
    stream.reset();
    buffer.clear();
    exchanges = 0;
  }

  // Runs the io_context until the operation just started has completed.
  void Run() {
    ioc.restart();
    ioc.run();
  }
};

HttpClient::HttpClient(HttpUrl url, std::string token, Micros timeout)
    : url_(std::move(url)), token_(std::move(token)), timeout_(timeout), impl_(std::make_unique<Impl>()) {}

HttpClient::~HttpClient() = default;

Result<HttpClientResponse> HttpClient::Send(const HttpClientRequest& request) {
  const Micros limit = timeout_ > Micros{} ? timeout_ : 10 * kSecond;
  const std::string limit_text = FormatDuration(limit);
  Impl& im = *impl_;
  for (int attempt = 0;; ++attempt) {
    const bool reused = im.stream.has_value() && im.exchanges > 0;
    if (!im.stream) {
      // Resolve (bounded by the timeout too), then connect.
      tcp::resolver resolver(im.ioc);
      beast::error_code ec;
      tcp::resolver::results_type endpoints;
      bool done = false;
      resolver.async_resolve(url_.host, url_.port, [&](beast::error_code e, tcp::resolver::results_type r) {
        ec = e;
        endpoints = std::move(r);
        done = true;
      });
      im.ioc.restart();
      im.ioc.run_for(limit);
      if (!done) {
        resolver.cancel();
        im.Run();
        return Status::Unavailable(fmt::format("cannot resolve {} within {}", url_.host, limit_text));
      }
      if (ec) return Status::Unavailable(fmt::format("cannot resolve {}: {}", url_.host, ec.message()));
      im.stream.emplace(im.ioc);
      im.stream->expires_after(limit);
      im.stream->async_connect(endpoints, [&](beast::error_code e, const tcp::endpoint&) { ec = e; });
      im.Run();
      if (ec) {
        im.Close();
        if (ec == beast::error::timeout) {
          return Status::Unavailable(fmt::format("cannot connect to {} within {}", url_.text, limit_text));
        }
        return Status::Unavailable(fmt::format("cannot connect to {}: {}", url_.text, ec.message()));
      }
    }

    http::request<http::string_body> req;
    req.version(11);
    req.method_string(request.method);
    req.target(url_.prefix + request.target);
    const bool v6 = url_.host.find(':') != std::string::npos;
    req.set(http::field::host,
            v6 ? fmt::format("[{}]:{}", url_.host, url_.port) : fmt::format("{}:{}", url_.host, url_.port));
    req.set(http::field::user_agent, "lyapcast/0.1.0");
    req.set(http::field::accept, request.accept);
    if (!token_.empty()) req.set(http::field::authorization, "Bearer " + token_);
    if (!request.content_type.empty()) req.set(http::field::content_type, request.content_type);
    req.body() = request.body;
    req.keep_alive(true);
    req.prepare_payload();

    beast::error_code ec, write_ec;
    im.stream->expires_after(limit);
    http::async_write(*im.stream, req, [&](beast::error_code e, std::size_t) { write_ec = e; });
    im.Run();
    http::response_parser<http::string_body> parser;
    parser.body_limit(kMaxBody);
    // The daemon may answer before it has read a body (a refused token on an
    // upload) and close: read that answer even when the write failed.
    if (!write_ec || !request.body.empty()) {
      im.stream->expires_after(limit);
      http::async_read(*im.stream, im.buffer, parser, [&](beast::error_code e, std::size_t) { ec = e; });
      im.Run();
    }
    if (write_ec && (ec || request.body.empty())) ec = write_ec;
    if (ec) {
      im.Close();
      // The daemon may close an idle keep-alive connection just as we reuse it.
      const bool stale = ec == http::error::end_of_stream || ec == asio::error::connection_reset ||
                         ec == asio::error::broken_pipe || ec == asio::error::eof;
      if (reused && stale && attempt == 0 && request.method == "GET") continue;
      if (ec == beast::error::timeout) {
        return Status::Unavailable(fmt::format("no answer from {} within {} (--timeout)", url_.text, limit_text));
      }
      if (ec == http::error::body_limit) {
        return Status::Corruption(fmt::format("the answer from {} is larger than {} bytes", url_.text, kMaxBody));
      }
      if (ec == http::error::end_of_stream) {
        return Status::Unavailable(fmt::format("{} closed the connection without answering", url_.text));
      }
      if (ec.category() == http::make_error_code(http::error::need_more).category()) {
        return Status::Corruption(fmt::format("{} did not answer in HTTP/1.1: {}", url_.text, ec.message()));
      }
      return Status::Unavailable(fmt::format("lost the connection to {}: {}", url_.text, ec.message()));
    }
    auto& res = parser.get();
    HttpClientResponse out;
    out.status = static_cast<int>(res.result_int());
    out.reason = std::string(res.reason());
    for (const auto& field : res) {
      out.headers.emplace_back(std::string(field.name_string()), std::string(field.value()));
    }
    out.content_type = out.Header("Content-Type");
    out.body = std::move(res.body());
    ++im.exchanges;
    if (!res.keep_alive()) im.Close();
    return out;
  }
}

}  // namespace lyapcast::cli
