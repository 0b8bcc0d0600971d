// Plain HTTP request/response values, so routes are written without Beast
// (Beast stays inside http_server.cpp; DEVELOPERS.md "Pitfalls": compile time).
#pragma once

#include <cstdint>
#include <functional>
#include <map>
#include <optional>
#include <string>
#include <utility>
#include <vector>

namespace lyapcast {

struct HttpRequest {
  std::string method;                         // "GET", "POST", ...
  std::string path;                           // decoded path, no query: "/v1/feeds"
  std::map<std::string, std::string> query;   // decoded query parameters (last wins)
  std::string authorization;                  // raw Authorization header
  std::string accept;                         // raw Accept header
  std::string body;
};

struct HttpResponse {
  int status = 200;
  std::string content_type = "application/json";
  std::string body;
  std::vector<std::pair<std::string, std::string>> headers;  // extra headers
};

// Called on an io thread; must not block on training or long I/O.
using HttpHandler = std::function<HttpResponse(const HttpRequest&)>;

// What the server does once a request's line and headers are read, before
// its body: answer at once (the body is then never read, and the connection
// closes after the answer), or read a body of at most `body_limit` bytes
// (0: the server's own limit).
struct HeadDecision {
  std::optional<HttpResponse> respond;
  std::uint64_t body_limit = 0;
};
// Called on an io thread with the request as far as it is read (`body`
// empty); must be quick.
using HeadHandler = std::function<HeadDecision(const HttpRequest& head)>;

}  // namespace lyapcast
