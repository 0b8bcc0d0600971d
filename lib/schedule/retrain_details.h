// RetrainDetails: what a retraining job records about the version it made,
// beyond the registry's columns (the `details` JSON object of a model row,
// shown verbatim by the HTTP API's model listings).
//
// One serializer (ToJson) and one tolerant parser (ParseRetrainDetails) so
// the daemon, the CLI and the benchmarks read the same keys. JSON has no NaN
// or infinity: non-finite numbers are written as null and read back as NaN
// (per-channel errors) or absent (optionals). Numbers round-trip exactly.
//
// Keys: strategy, trigger, iterations, seconds, stop, train_pairs,
// selection_pairs (held-out pairs early stopping chose the weights on),
// validation_pairs (held-out pairs the promotion was judged on),
// validation_per_channel (the candidate's normalized RMSE per channel on the
// judged pairs), active_error, refit, exponents {data, dynamics} (also the
// registry's data_exponent / dynamics_exponent columns); for an uploaded
// version (trigger "upload") also upload {file_feed, source, bytes,
// activate, judged_on, file_validation_error}: what the file's metadata said
// and which data judged it (schedule/model_upload.h).
//
// Pure functions; thread-safe.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace lyapcast {

// An uploaded version: what its file said about itself, and how it was judged.
struct UploadDetails {
  std::string file_feed;    // the file's "feed" metadata ("" when absent)
  std::string source;       // the file's "source" metadata, e.g. "lyapcast train"
  std::int64_t bytes = 0;   // file size
  bool activate = false;    // activated at once on request rather than judged
  std::string judged_on;    // in words: which held-out data scored it ("" when none did)
  std::optional<double> file_validation_error;  // the file's "validation_error" metadata
};

struct RetrainDetails {
  std::string strategy = "supervised";
  std::string trigger = "cadence";   // cadence, drift, operator or upload
  int iterations = 0;
  double seconds = 0;                // wall time of the fit
  std::string stop;                  // FitStopName
  std::int64_t train_pairs = 0;
  std::int64_t selection_pairs = 0;
  std::int64_t validation_pairs = 0;
  std::vector<double> validation_per_channel;  // NaN where a channel had no target
  std::optional<double> active_error;          // the active version on the same pairs
  std::string refit;                           // why the normalization moved; empty if it did not
  std::string family;         // the stored model's family (ForecastModel::family); empty in older rows
  std::string family_note;    // what was fitted, in words (polynomial: degree, ridge, pairs); may be empty
  std::string family_choice;  // model.family auto: which family won and why; empty otherwise
  std::vector<std::string> left_out;           // constant channels left out of the model (Normalization)
  std::string excluded;                        // readings of suspect sensors not trained on, in words; empty if none
  std::optional<double> data_exponent, dynamics_exponent;  // per second of data time
  std::optional<UploadDetails> upload;                     // uploaded versions only
};

// A JSON object (one line).
std::string ToJson(const RetrainDetails& d);

// Reads what it can: unknown keys are ignored, missing or mistyped ones keep
// their defaults, text that is not a JSON object gives all defaults (older
// versions and hand-edited rows must not stop a daemon).
RetrainDetails ParseRetrainDetails(std::string_view json);

// The RMS over channels of validation_per_channel (finite entries only);
// nullopt when there is none. The drift monitor compares its rolling error,
// an RMS over channels, with this.
std::optional<double> ValidationRms(const RetrainDetails& d);

}  // namespace lyapcast
