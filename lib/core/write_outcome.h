// WriteOutcome: what became of one submitted sample, shared by the store
// writer (which decides it) and the ingest session (which answers it), so
// neither library needs the other.
#pragma once

#include "core/reject_reason.h"

namespace lyapcast {

// Per-sample result: accepted (stored now or an identical resend) or why not.
struct WriteOutcome {
  bool accepted = false;
  RejectReason reason = RejectReason::kStorageUnavailable;  // when !accepted
};

}  // namespace lyapcast
