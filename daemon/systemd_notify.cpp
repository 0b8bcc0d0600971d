#include "systemd_notify.h"

#include <spdlog/spdlog.h>
#include <systemd/sd-daemon.h>

#include <cstdlib>
#include <cstring>
#include <string>

namespace lyapcast {
namespace {

// sd_notify returns > 0 when sent, 0 when NOTIFY_SOCKET is unset, < 0 (-errno)
// on failure. The environment is left as it is (unset_environment = 0) so a
// later notification still finds the socket.
void Send(const std::string& message, const char* what) {
  const int r = sd_notify(0, message.c_str());
  if (r < 0) spdlog::warn("systemd: cannot send {} to NOTIFY_SOCKET: {}", what, std::strerror(-r));
}

}  // namespace

bool NotifySocketPresent() {
  const char* socket = std::getenv("NOTIFY_SOCKET");
  return socket != nullptr && socket[0] != '\0';
}

void NotifyReady(std::string_view status) {
  if (!NotifySocketPresent()) return;
  std::string line(status);
  for (char& c : line) {
    if (c == '\n' || c == '\r') c = ' ';
  }
  Send("READY=1\nSTATUS=" + line, "READY=1");
  spdlog::debug("systemd: sent READY=1");
}

void NotifyStopping() {
  if (!NotifySocketPresent()) return;
  Send("STOPPING=1\nSTATUS=stopping: finishing received lines", "STOPPING=1");
}

}  // namespace lyapcast
