// HttpClient: a small synchronous HTTP/1.1 client for the daemon's API
// (docs/http-api.md), with plain request/response values so the commands
// compile without Boost.Beast (only http_client.cpp includes it; see
// DEVELOPERS.md "Pitfalls": compile time).
//
// Plain http:// only. One keep-alive connection per client, opened on first
// use; a GET that fails on a reused connection (the daemon closed it while
// idle) is retried once on a fresh one. Every connect, write and read is
// bounded by the client's timeout. Single-threaded.
#pragma once

#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"

namespace lyapcast::cli {

// "http://host[:port][/prefix]" (default port 80); "host:port" without a
// scheme means http. The prefix (a reverse proxy's path) is put before
// every request's target.
struct HttpUrl {
  std::string host;  // without brackets for IPv6
  std::string port;
  std::string prefix;  // "" or "/something" without a trailing slash
  std::string text;    // as given, for messages
};
[[nodiscard]] Result<HttpUrl> ParseHttpUrl(const std::string& url);

struct HttpClientRequest {
  std::string method = "GET";
  std::string target;  // "/v1/feeds?x=1", already percent-encoded
  std::string accept = "application/json";
  std::string body;
  std::string content_type;  // for a body
};

struct HttpClientResponse {
  int status = 0;
  std::string reason;  // "Not Found"
  std::string content_type;
  std::string body;
  std::vector<std::pair<std::string, std::string>> headers;
  // A header's value ("" when absent); names compare case-insensitively.
  std::string Header(const std::string& name) const;
};

class HttpClient {
 public:
  // `token` (may be empty) is sent as "Authorization: Bearer <token>" and
  // never appears in a message.
  HttpClient(HttpUrl url, std::string token, Micros timeout);
  ~HttpClient();
  HttpClient(const HttpClient&) = delete;
  HttpClient& operator=(const HttpClient&) = delete;

  // Any HTTP status is a successful exchange; errors are for connections
  // (kUnavailable: cannot resolve, refused, timed out, closed) and
  // malformed responses (kCorruption).
  [[nodiscard]] Result<HttpClientResponse> Send(const HttpClientRequest& request);

  const HttpUrl& url() const { return url_; }

 private:
  struct Impl;
  HttpUrl url_;
  std::string token_;
  Micros timeout_;
  std::unique_ptr<Impl> impl_;
};

// Percent-encodes a query value or path segment (RFC 3986 unreserved kept).
std::string UrlEncode(const std::string& text);

}  // namespace lyapcast::cli
