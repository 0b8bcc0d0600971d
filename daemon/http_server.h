// HttpServer: Boost.Beast HTTP/1.1 listener on the daemon's io_context.
// Parses requests within limits, hands them to an HttpHandler as plain
// values and writes the response; keep-alive; read/write timeouts. Requests
// over the limits get a JSON error (413 body too large, 431 headers, 400
// malformed) and the connection closes. An optional HeadHandler sees each
// request after its headers, before its body: it may answer at once (e.g.
// refuse a token) or allow a larger body for one route (uploads).
// Threads: constructor and Listen() before io_context::run; the rest on io threads.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>

#include "config/config.h"
#include "core/status.h"
#include "http_types.h"

namespace boost::asio {
class io_context;
}

namespace lyapcast {

struct HttpServerOptions {
  Endpoint endpoint;
  std::uint32_t max_body = 64 * 1024;      // bytes, unless `head` allows more for a request
  std::uint32_t max_header = 16 * 1024;    // bytes of the request line + headers
  std::uint32_t max_header_fields = 100;   // header fields per request
  Micros read_timeout = 30 * kSecond;   // per request, headers and body
  Micros write_timeout = 30 * kSecond;
  Micros keep_alive = 60 * kSecond;     // idle time between requests
  int max_connections = 512;
  HeadHandler head;                        // may be empty
};

class HttpServer {
 public:
  HttpServer(boost::asio::io_context& io, HttpServerOptions options, HttpHandler handler);
  ~HttpServer();
  [[nodiscard]] Status Listen();
  std::uint16_t port() const;
  void StartAccepting();
  // Stops accepting and closes idle keep-alive connections; requests in
  // flight finish.
  void Shutdown();

 private:
  struct Impl;
  std::shared_ptr<Impl> impl_;
};

}  // namespace lyapcast
