// Model upload: a model file trained elsewhere (`lyapcast train`) loaded
// into the running daemon (docs/http-api.md "Upload"; docs/design.md
// "Retraining").
//
// Two steps, as the API runs them:
//
//  1. ValidateUpload, on the HTTP thread (cheap, no database): the bytes are
//     a model file this build reads (magic, format version, checksum, sizes,
//     finite values) and fit the feed: its channels by name and in order,
//     every channel a state channel, its step and its model time unit.
//     Nothing is stored when it fails; `problem` says what kind of failure it
//     is, for the route's error code.
//
//  2. RunUpload, as a scheduler job on a trainer thread (it reads the window
//     and runs the model's Lyapunov estimate, so it never runs on the HTTP
//     thread, and it never overlaps a retraining job of the same feed):
//      - judged like a retraining candidate (judge.h), against the active
//        model on the judge half of the feed's newest held-out data: the
//        held-out share of the data since the active version's training end,
//        as a retraining job at this moment would split it, or, when there
//        is no such data, the held-out share of the whole window; promoted
//        or rejected by the same rule (retrain.promote_tolerance), or
//      - activated at once when the operator asked for it (still scored on
//        the same pairs, so its validation error is known);
//     then recorded as the feed's next version with origin `uploaded` (the
//     file bytes verbatim, no parent), active or rejected. The judge cannot
//     know what data the file was trained on: if that included the judged
//     span, the upload's error there is optimistic.
//
// The recorded training range is the file's `trained_from`/`trained_to`
// metadata (what `lyapcast train` writes), clamped to the data the daemon
// had when the job ran; without it the version counts as trained up to
// then. Drift scoring and the next warm start (which keeps the uploaded
// architecture) start after that range.
//
// Pure functions of their arguments and the registry; thread-safe with one
// registry per thread.
#pragma once

#include <cstdint>
#include <limits>
#include <memory>
#include <optional>
#include <span>
#include <string>

#include "config/config.h"
#include "core/sample.h"
#include "core/status.h"
#include "learn/model_file.h"
#include "schedule/active_model.h"
#include "schedule/retrain_job.h"
#include "store/model_registry.h"

namespace lyapcast {

// The largest upload accepted (the HTTP route's body limit). A model file of
// 64 channels and three hidden layers of 512 is about 2.4 MB in float32.
inline constexpr std::uint64_t kMaxUploadBytes = std::uint64_t{16} << 20;  // 16 MiB

enum class UploadProblem {
  kNone,
  kEmpty,          // no bytes at all
  kTooLarge,       // more than kMaxUploadBytes
  kBadFile,        // not a model file, or malformed inside
  kTruncated,      // shorter than its header says
  kChecksum,       // checksum mismatch
  kFormatVersion,  // a format version this build does not read
  kNonFinite,      // a non-finite weight, mu or normalization value
  kWrongChannels,  // channel count or names (or their order) differ from the feed's
  kWrongRoles,     // a channel role other than state, or one this build does not know
  kWrongStep,      // data step, model time unit or dt differ from the feed's
};
// The stable error code of the HTTP API: "empty-body", "body-too-large",
// "bad-model-file", "truncated-model-file", "checksum-mismatch",
// "unsupported-format-version", "non-finite-weights", "wrong-channels",
// "wrong-roles", "wrong-step" ("" for kNone).
const char* UploadProblemCode(UploadProblem p);

// A model file that fits its feed, with what its metadata says about it.
struct ValidatedUpload {
  std::string file;  // the bytes as uploaded (stored verbatim)
  ModelFileContents contents;
  // The file's model as the daemon serves it: a neural flow map in float (a
  // float64 file rounded), a polynomial map as stored. Never null.
  std::shared_ptr<const ForecastModel> model;
  std::string file_feed;  // metadata "feed" ("" when absent)
  std::string source;     // metadata "source" ("" when absent)
  std::optional<DataTime> trained_from, trained_to;  // metadata, when RFC 3339
  std::optional<double> validation_error;            // metadata, when a finite number
};

// Checks `bytes` against `feed` (see step 1 above). On failure the message
// names what is wrong and what the feed needs, and *problem (when given)
// says which kind of problem it is; on success *problem is kNone.
[[nodiscard]] Result<ValidatedUpload> ValidateUpload(std::string bytes, const FeedConfig& feed,
                                                     UploadProblem* problem = nullptr);

struct UploadInput {
  const FeedConfig* feed = nullptr;  // required
  std::uint32_t feed_index = 0;
  DataTime until{};  // the judge uses samples with t < until
  // The feed's samples before `until` within the retention window, oldest
  // first (ReadWindow); may be empty.
  std::span<const Sample> window;
  std::shared_ptr<const ActiveModel> active;       // none: the feed has no model yet
  std::shared_ptr<const ValidatedUpload> upload;   // required
  bool activate = false;                           // serve at once instead of judging
  std::string requested;  // how it was asked for, for the reason ("over the API")
  std::uint64_t seed = 1;  // PrepareRetrainData's replay draw (the judge does not use it)
  // The feed's current exponent estimates (per second), recorded with the
  // version as a retraining job records them.
  std::optional<double> data_exponent{}, dynamics_exponent{};
};

struct UploadOutcome {
  RetrainVerdict verdict = RetrainVerdict::kRejected;  // kActivated, kPromoted or kRejected
  std::int64_t version = 0;                            // the recorded version
  std::string reason;                                  // in words, for logs, the registry and the API
  double candidate_error = std::numeric_limits<double>::quiet_NaN();  // on the judged pairs
  double active_error = std::numeric_limits<double>::quiet_NaN();
  std::optional<double> lambda_max;                  // the uploaded map's largest exponent, per second
  std::shared_ptr<const ActiveModel> promoted;       // set when activated or promoted
};

// Step 2 above. Errors only for failures of the registry.
[[nodiscard]] Result<UploadOutcome> RunUpload(ModelRegistry& registry, const UploadInput& in);

}  // namespace lyapcast
