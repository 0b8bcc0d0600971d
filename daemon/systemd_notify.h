// Readiness and stop notifications to systemd (sd_notify, Type=notify units).
//
// When the daemon runs under systemd with Type=notify, systemd sets
// NOTIFY_SOCKET and waits for READY=1 before it considers the service
// started (and starts units ordered after it). Without NOTIFY_SOCKET these
// calls do nothing, so the daemon behaves the same from a shell, a test or
// another supervisor.
//
// Threads: any thread; each call sends one datagram and keeps no state.
// Failures (socket gone, permission) are logged as warnings and otherwise
// ignored: a notification is never a reason to stop serving.
#pragma once

#include <string_view>

namespace lyapcast {

// Whether NOTIFY_SOCKET is set (the daemon was started by systemd with
// Type=notify, or by something that speaks the same protocol).
bool NotifySocketPresent();

// Sends READY=1 and STATUS=<status> (one line; newlines are replaced by
// spaces). Call once, after every listener is up.
void NotifyReady(std::string_view status);

// Sends STOPPING=1 (and a STATUS= line saying so). Call when a stop begins.
void NotifyStopping();

}  // namespace lyapcast
