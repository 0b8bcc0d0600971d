#include "core/status.h"

namespace lyapcast {

const char* StatusCodeName(StatusCode code) {
  switch (code) {
    case StatusCode::kOk: return "ok";
    case StatusCode::kInvalidArgument: return "invalid-argument";
    case StatusCode::kNotFound: return "not-found";
    case StatusCode::kFailedPrecondition: return "failed-precondition";
    case StatusCode::kIoError: return "io-error";
    case StatusCode::kUnavailable: return "unavailable";
    case StatusCode::kCorruption: return "corruption";
    case StatusCode::kCancelled: return "cancelled";
    case StatusCode::kInternal: return "internal";
  }
  return "unknown";
}

std::string Status::ToString() const {
  if (ok()) return "ok";
  return std::string(StatusCodeName(code_)) + ": " + message_;
}

}  // namespace lyapcast
