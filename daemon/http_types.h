// Plain HTTP request/response values, so routes are written without Beast
// (Beast stays inside http_server.cpp; DEVELOPERS.md "Pitfalls": compile time).
#pragma once

#include <functional>
#include <map>
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

}  // namespace lyapcast
