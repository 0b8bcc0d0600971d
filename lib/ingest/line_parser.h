// LineParser: one ingest line -> a validated sample, an auth line, or a
// precise rejection (docs/protocol.md "Sample line format").
//
// Formats, chosen by the first non-blank byte:
//   '{'      NDJSON: {"feed":"loop-a","t":1733097600.25,"values":{"flow":0.31}}
//            t as epoch seconds or an RFC 3339 string; an absent channel or a
//            null value is missing; repeated keys are errors.
//   "auth "  auth <token>
//   other    CSV: loop-a,1733097600.25,0.31,1.2,-0.4 in the feed's channel
//            order; an empty field is missing; t as in NDJSON (unquoted).
// A trailing '\r' is ignored. Lines must be valid UTF-8 without control bytes
// (tab allowed). At least one channel must be present.
//
// Not checked here (the writer knows the stored window): too-old and
// duplicate-time. Checked here: future-time against wall_now + max_future_skew.
//
// Thread safety: an instance keeps scratch buffers; use one per session.
// The Config must outlive the parser.
#pragma once

#include <memory>
#include <string>
#include <string_view>
#include <unordered_map>

#include "config/config.h"
#include "core/reject_reason.h"
#include "core/sample.h"

namespace lyapcast {

struct ParsedLine {
  enum class Kind { kSample, kAuth, kReject };
  Kind kind = Kind::kReject;
  FeedSample sample;     // kSample
  std::string token;     // kAuth
  RejectReason reason = RejectReason::kBadJson;  // kReject
  std::string message;   // kReject: what was wrong and what is expected
};

class LineParser {
 public:
  LineParser(const Config& config, Micros max_future_skew);
  ~LineParser();

  // `line` excludes the newline. `wall_now`: the machine clock, for the future-time check.
  ParsedLine Parse(std::string_view line, WallTime wall_now);

 private:
  struct JsonScratch;
  ParsedLine ParseCsv(std::string_view line, WallTime wall_now);
  ParsedLine ParseJson(std::string_view line, WallTime wall_now);

  const Config& config_;
  const Micros max_future_skew_;
  std::unordered_map<std::string, std::uint32_t> feed_index_;
  std::unique_ptr<JsonScratch> json_;
};

}  // namespace lyapcast
