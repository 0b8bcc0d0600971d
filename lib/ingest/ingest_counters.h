// IngestCounters: totals since start over every ingest session of a server
// (all transports), for /v1/feeds, /metrics and the shutdown log line.
//
// Threads: sessions add with relaxed atomics from their own threads; any
// thread may read. The owner (the server) must outlive its sessions.
#pragma once

#include <atomic>
#include <cstdint>

#include "core/reject_reason.h"

namespace lyapcast {

struct IngestCounters {
  std::atomic<std::uint64_t> connections_accepted{0};  // kept by the transport
  std::atomic<std::uint64_t> connections_refused{0};   // kept by the transport
  std::atomic<std::uint64_t> lines{0};                 // every framed line, answered or not yet
  std::atomic<std::uint64_t> accepted{0};              // samples acknowledged after commit
  std::atomic<std::uint64_t> rejected[kRejectReasonCount] = {};  // by RejectReason
};

}  // namespace lyapcast
