// Binding a listening socket for a configured endpoint; shared by the
// ingest and HTTP servers. Include only from .cpp files that use Asio.
#pragma once

#include <utility>  // before Asio: Boost 1.74 needs std::exchange (DEVELOPERS.md "Pitfalls")

#include <fmt/format.h>

#include <boost/asio/ip/tcp.hpp>

#include "config/config.h"
#include "core/status.h"

namespace lyapcast {

// Opens, binds and listens. `key` names the config key in messages
// ("listen.ingest"); errors carry the endpoint and the OS reason.
inline Status BindAndListen(boost::asio::ip::tcp::acceptor& acceptor, const Endpoint& ep, const char* key) {
  namespace asio = boost::asio;
  boost::system::error_code ec;
  const std::string host = ep.host == "localhost" ? "127.0.0.1" : ep.host;
  const auto address = asio::ip::make_address(host, ec);
  if (ec) return Status::Invalid(fmt::format("{}: '{}' is not an IP address", key, ep.host));
  const asio::ip::tcp::endpoint endpoint(address, ep.port);
  if (acceptor.open(endpoint.protocol(), ec); ec) return Status::Io(fmt::format("{}: socket: {}", key, ec.message()));
  acceptor.set_option(asio::ip::tcp::acceptor::reuse_address(true), ec);
  if (!ec) acceptor.bind(endpoint, ec);
  if (!ec) acceptor.listen(asio::socket_base::max_listen_connections, ec);
  if (ec) return Status::Io(fmt::format("{}: cannot listen on {}: {}", key, ep.ToString(), ec.message()));
  return Status::Ok();
}

}  // namespace lyapcast
