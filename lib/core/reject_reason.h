// Why an ingest line was not accepted. Each reason has a stable kebab-case
// code used on the wire (`error <line> <code> <text>`), in logs and in
// metrics; never rename one (docs/protocol.md "Replies").
#pragma once

#include <string_view>

namespace lyapcast {

enum class RejectReason {
  kUnknownFeed,         // feed id not in the config
  kUnknownChannel,      // JSON value for a channel the feed does not have
  kDuplicateChannel,    // a JSON channel key repeated
  kDuplicateField,      // a top-level JSON key repeated
  kMissingField,        // a required JSON key ("feed", "t", "values") absent
  kUnknownField,        // an unexpected top-level JSON key
  kFieldCount,          // CSV line with the wrong number of fields
  kNotANumber,          // a value that is not a number
  kNonFinite,           // NaN or infinity
  kNoValues,            // every channel missing
  kBadTime,             // unparsable or non-finite timestamp
  kFutureTime,          // beyond wall time + limits.max_future_skew
  kTooOld,              // older than the feed's newest sample - retention
  kDuplicateTime,       // a different sample is already stored at that time
  kLineTooLong,         // longer than limits.max_line
  kBadEncoding,         // invalid UTF-8 or control/binary bytes
  kBadJson,             // not well-formed JSON, or wrong JSON types
  kBadAuth,             // wrong or missing ingest token
  kStorageUnavailable,  // the store could not commit (disk full, I/O error)
  kShuttingDown,        // the daemon is stopping; resend later
};

inline constexpr int kRejectReasonCount = static_cast<int>(RejectReason::kShuttingDown) + 1;

constexpr std::string_view RejectCode(RejectReason r) {
  switch (r) {
    case RejectReason::kUnknownFeed: return "unknown-feed";
    case RejectReason::kUnknownChannel: return "unknown-channel";
    case RejectReason::kDuplicateChannel: return "duplicate-channel";
    case RejectReason::kDuplicateField: return "duplicate-field";
    case RejectReason::kMissingField: return "missing-field";
    case RejectReason::kUnknownField: return "unknown-field";
    case RejectReason::kFieldCount: return "field-count";
    case RejectReason::kNotANumber: return "not-a-number";
    case RejectReason::kNonFinite: return "non-finite";
    case RejectReason::kNoValues: return "no-values";
    case RejectReason::kBadTime: return "bad-time";
    case RejectReason::kFutureTime: return "future-time";
    case RejectReason::kTooOld: return "too-old";
    case RejectReason::kDuplicateTime: return "duplicate-time";
    case RejectReason::kLineTooLong: return "line-too-long";
    case RejectReason::kBadEncoding: return "bad-encoding";
    case RejectReason::kBadJson: return "bad-json";
    case RejectReason::kBadAuth: return "bad-auth";
    case RejectReason::kStorageUnavailable: return "storage-unavailable";
    case RejectReason::kShuttingDown: return "shutting-down";
  }
  return "unknown";
}

}  // namespace lyapcast
