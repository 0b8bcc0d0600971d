// Status and Result<T>: errors as values across module boundaries.
//
// A Status is either ok or carries a code and a human-readable message that
// names what was wrong and where. Result<T> holds a T or a non-ok Status.
// Both are [[nodiscard]]: an ignored error is a compile warning (-Werror).
// Thread safety: plain values; copy freely between threads.
#pragma once

#include <cassert>
#include <string>
#include <utility>
#include <variant>

namespace lyapcast {

enum class StatusCode {
  kOk = 0,
  kInvalidArgument,     // input (config, request, file contents) is malformed
  kNotFound,            // a named thing does not exist
  kFailedPrecondition,  // state does not allow it (e.g. store/config mismatch)
  kIoError,             // the operating system or SQLite reported a failure
  kUnavailable,         // temporarily impossible (disk full); retry later
  kCorruption,          // stored bytes do not match their checksum/format
  kCancelled,
  kInternal,
};

// Stable lower-case name of a code, e.g. "invalid-argument".
const char* StatusCodeName(StatusCode code);

class [[nodiscard]] Status {
 public:
  Status() = default;  // ok
  Status(StatusCode code, std::string message) : code_(code), message_(std::move(message)) {}

  static Status Ok() { return {}; }
  static Status Invalid(std::string m) { return {StatusCode::kInvalidArgument, std::move(m)}; }
  static Status NotFound(std::string m) { return {StatusCode::kNotFound, std::move(m)}; }
  static Status Precondition(std::string m) { return {StatusCode::kFailedPrecondition, std::move(m)}; }
  static Status Io(std::string m) { return {StatusCode::kIoError, std::move(m)}; }
  static Status Unavailable(std::string m) { return {StatusCode::kUnavailable, std::move(m)}; }
  static Status Corruption(std::string m) { return {StatusCode::kCorruption, std::move(m)}; }
  static Status Cancelled(std::string m) { return {StatusCode::kCancelled, std::move(m)}; }
  static Status Internal(std::string m) { return {StatusCode::kInternal, std::move(m)}; }

  bool ok() const { return code_ == StatusCode::kOk; }
  StatusCode code() const { return code_; }
  const std::string& message() const { return message_; }
  // "<code-name>: <message>", or "ok".
  std::string ToString() const;

 private:
  StatusCode code_ = StatusCode::kOk;
  std::string message_;
};

// Holds a value or an error. Construct from a T (success) or a non-ok Status.
template <typename T>
class [[nodiscard]] Result {
 public:
  Result(T value) : v_(std::move(value)) {}  // NOLINT: implicit by design
  Result(Status status) : v_(std::move(status)) {  // NOLINT: implicit by design
    assert(!std::get<Status>(v_).ok() && "Result constructed from an ok Status");
  }

  bool ok() const { return std::holds_alternative<T>(v_); }
  // Requires ok().
  T& value() & { return std::get<T>(v_); }
  const T& value() const& { return std::get<T>(v_); }
  T&& value() && { return std::get<T>(std::move(v_)); }
  T* operator->() { return &value(); }
  const T* operator->() const { return &value(); }
  T& operator*() & { return value(); }
  const T& operator*() const& { return value(); }
  // The error; Status::Ok() when ok().
  Status status() const { return ok() ? Status::Ok() : std::get<Status>(v_); }

 private:
  std::variant<T, Status> v_;
};

}  // namespace lyapcast
