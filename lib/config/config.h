// lyapcast configuration: the YAML file parsed into validated structs.
//
// Every key has a documented default (the member initializers below and
// docs/configuration.md "Keys" say the same). A default that a library's own
// options type also needs is written there once and referred to here (e.g.
// FitOptions{}.iterations); some structs are such types (HealthConfig).
// LoadConfig() rejects unknown keys, duplicate keys, wrong types, ids outside
// the grammar, duplicate feed or channel ids, non-positive steps, unparsable
// durations and sizes, and listening beyond loopback without tokens (unless
// explicitly allowed). Each error names the file, line, key path and what is
// allowed, e.g.
//   config/demo.yaml:14: feeds[0].step: must be a positive duration such as
//   500ms or 2s; got '-1s'
// Relative paths are resolved against the config file's folder.
// Thread safety: the structs are plain values; LoadConfig is reentrant.
#pragma once

#include <cstdint>
#include <filesystem>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "core/data_time.h"
#include "core/identifiers.h"  // IsValidFeedId, IsValidChannelName: the grammars the parser checks
#include "core/status.h"
#include "learn/activation.h"
#include "learn/constraint_options.h"
#include "learn/fit_options.h"
#include "learn/trajectory_options.h"
#include "monitor/channel_quality.h"
#include "monitor/drift_monitor_options.h"
#include "monitor/health_levels.h"
#include "physics/dynamics_spec.h"
#include "store/writer_options.h"

namespace lyapcast {

struct Endpoint {
  std::string host = "127.0.0.1";  // IPv4/IPv6 literal or "localhost"
  std::uint16_t port = 0;          // 0 = the OS picks a free port
  std::string ToString() const;    // "127.0.0.1:7301", "[::1]:7301"
};

struct ListenConfig {
  Endpoint ingest{"127.0.0.1", 7301};
  Endpoint http{"127.0.0.1", 7302};
  // Without this, a non-loopback listener requires the matching tokens
  // (ingest: ingest token; http: read and admin tokens).
  bool allow_remote_without_tokens = false;
};

struct LimitsConfig {
  std::uint64_t max_line = 64 * 1024;           // bytes per ingest line, excluding the newline
  int max_connections = 256;                    // concurrent ingest connections
  Micros idle_timeout = 5 * 60 * kSecond;  // close ingest connections silent this long
  // Group commit after this long ... or this many samples, whichever first
  // (the writer's defaults, store/writer_options.h).
  Micros commit_every = WriterOptions{}.commit_every;
  int commit_batch = WriterOptions{}.commit_batch;
  Micros max_future_skew = 10 * kSecond;  // samples newer than wall time + this: future-time
};

struct StorageConfig {
  std::filesystem::path path = "var/lyapcast.db";  // resolved against the config folder
  Micros retention = WriterOptions{}.retention;  // data time kept per feed (store/writer_options.h)
  int keep_models = 200;                           // retired/rejected versions kept per feed
};

struct AuthConfig {
  std::optional<std::filesystem::path> ingest_token_file;
  std::optional<std::filesystem::path> read_token_file;
  std::optional<std::filesystem::path> admin_token_file;
};

struct TrainingConfig {
  int threads = 1;        // concurrent retraining jobs
  bool lockstep = false;  // ingest waits at each due retrain (replays, tests)
};

// feeds[].dynamics.constraints[]: the trainer's own type, whose defaults are
// the config's (learn/constraint_options.h).
using ConstraintConfig = ConstraintOptions;

struct DynamicsConfig {
  Micros time_unit = kDefaultModelTimeUnit;  // one unit of model time in data time (physics/dynamics_spec.h)
  // One expression per channel, in the feed's channel order: (channel, expr).
  std::vector<std::pair<std::string, std::string>> equations;
  std::vector<std::pair<std::string, double>> constants;  // in file order
  std::vector<ConstraintConfig> constraints;
};

// Which kind of one-step map a feed's retraining fits (docs/design.md
// "Model families"): the neural flow map, the polynomial map, or both with
// the better one on held-out pairs.
enum class ModelFamily { kNeural, kPolynomial, kAuto };
const char* ModelFamilyName(ModelFamily f);  // "neural", "polynomial", "auto"

struct ModelConfig {
  ModelFamily family = ModelFamily::kNeural;
  // Polynomial degrees tried (the best on held-out pairs wins); model.degree
  // in the config: one degree, or auto = {2, ..., 6}.
  std::vector<int> degrees = {2, 3, 4, 5, 6};
  // model.denoise: auto (true) lets the polynomial fit also refit on states
  // smoothed by its own dynamics and keep that when its free runs on held-out
  // data last longer (docs/design.md "Fitting through sensor noise"); off
  // (false) fits the measured states only.
  bool denoise = true;
  std::vector<int> hidden = {64, 64};  // hidden layer widths
  Activation activation = Activation::kTanh;
  // Unrolled steps trained on contiguous data; longest composition G^k trained
  // across gaps (learn/trajectory_options.h owns the defaults).
  int rollout = TrajectoryOptions{}.rollout;
  int max_gap = TrajectoryOptions{}.max_gap;
};

// How a retraining job fits its candidate (schedule/training_strategy.h).
enum class RetrainStrategy { kSupervised };
const char* RetrainStrategyName(RetrainStrategy s);  // "supervised"

struct RetrainConfig {
  RetrainStrategy strategy = RetrainStrategy::kSupervised;
  double lyapunov_fraction = 0.5;  // retrain after this many Lyapunov times of new data
  Micros min_interval = 30 * kSecond;
  Micros max_interval = 3600 * kSecond;
  int min_pairs = 500;       // cold start once the window holds this many pairs
  double replay = 0.3;       // fraction of older window data mixed into a chunk
  double validation = TrajectoryOptions{}.validation;  // newest fraction held out for validation
  // The trainer's (learn/fit_options.h owns the defaults).
  int iterations = FitOptions{}.iterations;
  int batch = FitOptions{}.batch;
  double learning_rate = FitOptions{}.learning_rate;
  double weight_decay = FitOptions{}.weight_decay;
  double clip = FitOptions{}.clip;  // global gradient-norm clip
  Micros time_budget = 60 * kSecond;  // wall time per retrain (ignored in lockstep)
  double promote_tolerance = 0.05;
};

struct MonitorConfig {
  double horizon_tol = 0.5;  // normalized error defining the predictability horizon
  // The drift monitor's change test (monitor/drift_monitor_options.h owns the defaults).
  double change_threshold = DriftMonitorOptions{}.change_threshold;  // alarm threshold, in-control std devs
  double change_drift = DriftMonitorOptions{}.change_drift;          // drift allowance per observation, same units
};

// Alert / alarm levels of the health checks: the monitor's own type, whose
// defaults are the config's (monitor/health_levels.h).
using HealthConfig = HealthLevels;

struct FeedConfig {
  std::string id;                     // [a-z0-9][a-z0-9_-]{0,63}; required
  std::vector<std::string> channels;  // [A-Za-z_][A-Za-z0-9_]{0,63}, not "t"; 1..64; required
  std::vector<std::string> units;     // empty, or one per channel
  Micros step = kSecond;     // model step dt in data time; > 0
  // Per channel (feed order): how long its last value may be carried into
  // a state when the channel has no sample near the time (a slow channel
  // such as a lab assay); 0 = never carried. From `hold: {channel: 60s}`.
  std::vector<Micros> hold;
  // Per channel (feed order): the longest the channel is expected to go
  // without a reading; 0 = not declared. Status and health call a channel
  // silent after more than 3 periods of data without one (monitor/health.h).
  // Implies no hold: a slow channel normally wants both. From
  // `period: {channel: 5m}`.
  std::vector<Micros> period;
  // Per channel (feed order): configured range and bad-quality sentinels
  // for the sensor screen. From `quality: {channel: {range: [lo, hi],
  // bad_values: [-9999]}}`; unset channels get the robust rules only.
  std::vector<ChannelQuality> quality;
  std::optional<DynamicsConfig> dynamics;
  ModelConfig model;
  RetrainConfig retrain;
  MonitorConfig monitor;
  HealthConfig health;

  // Index of a channel by name, or -1.
  int ChannelIndex(std::string_view name) const;
};

struct Config {
  std::filesystem::path source;  // the file it was loaded from ("" for strings)
  ListenConfig listen;
  LimitsConfig limits;
  StorageConfig storage;
  AuthConfig auth;
  TrainingConfig training;
  std::vector<FeedConfig> feeds;  // at least one

  // Index of a feed by id, or -1.
  int FeedIndex(std::string_view id) const;
};

// Reads and validates a config file. Errors name file, line, key and what is
// allowed (StatusCode::kInvalidArgument), or the I/O failure (kIoError).
[[nodiscard]] Result<Config> LoadConfig(const std::filesystem::path& file);

// Same for YAML text; `source` names it in messages and its parent folder
// anchors relative paths (use "" to keep relative paths as they are).
[[nodiscard]] Result<Config> ParseConfig(std::string_view yaml, const std::filesystem::path& source);

// The feed's known dynamics as physics/dynamics_spec.h's DynamicsSpec (id,
// channels, equations, constants, time unit), for Dynamics::Compile.
// kInvalidArgument naming the feed when feed.dynamics is unset.
[[nodiscard]] Result<DynamicsSpec> ToDynamicsSpec(const FeedConfig& feed);

// The feed's drift monitor options: channel count, step and feed.monitor's
// change test (monitor/drift_monitor_options.h).
DriftMonitorOptions ToDriftMonitorOptions(const FeedConfig& feed);

// True for 127.0.0.0/8, ::1 and "localhost".
bool IsLoopbackHost(std::string_view host);

// Multi-line human summary for the start-up banner and --check-config.
std::string DescribeConfig(const Config& config);

}  // namespace lyapcast
