// FeedSimulator: one feed's simulated instrument for `lyapcast simulate`.
//
// Integrates the feed's known dynamics (its config's dynamics section) with
// RK4 and turns the state at each step into an ingest line as an instrument
// would send it: Gaussian sensor noise per channel, a dropped sample now and
// then (gap_rate), one random channel missing now and then (missing_rate),
// and scheduled parameter changes (steps and ramps of the dynamics'
// constants). Each call of Next() takes one step of the feed's data time.
//
// Determinism: the lines depend only on the feed's config, the options and
// the seed -- not on the standard library, the machine's load, or how the
// caller interleaves several simulators -- so a feed simulated alongside
// others yields the same bytes as when simulated alone.
//
// Thread safety: not thread-safe (it owns a Dynamics, which is not); one
// simulator per thread. Movable, not copyable. No method throws.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "config/config.h"
#include "config/scenario.h"
#include "core/data_time.h"
#include "core/status.h"
#include "physics/dynamics.h"

namespace lyapcast::cli {

enum class SampleFormat {
  kCsv,     // feed,t,v1,v2,...   (a missing channel is an empty field)
  kNdjson,  // {"feed":"...","t":...,"values":{"name":v,...}}   (a missing channel is left out)
};

struct FeedSimulatorOptions {
  DataTime start{};       // data time of the first sample (offset 0)
  Micros duration{};      // > 0; the simulator takes duration / step steps (rounded down)
  Micros step{};          // time between samples; 0 = the feed's step
  Micros transient{};     // >= 0: integrated before the first sample
  std::vector<double> from;   // initial state, one per channel; empty = 1 for every channel
  std::vector<double> noise;  // noise std per channel, in channel units; empty = none
  double gap_rate = 0;        // [0, 1): probability that a step's sample is dropped
  double missing_rate = 0;    // [0, 1]: probability that one random channel is missing (needs >= 2 channels)
  // [0, 0.4]: timestamp jitter, the std of each sample's offset from its
  // step as a fraction of the step (normal, cut at +-0.45 so order holds);
  // the reading is the true state at the stamped time, as when a logger
  // samples a little early or late and stamps the moment it sampled.
  double jitter = 0;
  std::vector<ParameterChange> changes;  // each names a constant of the dynamics; applied in this order
  std::uint64_t seed = 1;   // seed of noise, gaps and missing channels
  SampleFormat format = SampleFormat::kCsv;
};

class FeedSimulator {
 public:
  // What one step produced.
  struct Step {
    Micros offset{};  // data time of the step minus options.start
    bool kept = false;  // false: the sample was dropped (a gap)
    std::string line;   // the ingest line without a newline, when kept
  };

  // `dynamics` must be compiled from `feed` (Dynamics::Compile(ToDynamicsSpec(feed))); the
  // simulator takes it over (and changes its constants as scheduled).
  // Integrates the transient before returning. kInvalidArgument when an
  // option is out of its range above (from or noise not one per channel, a
  // change naming no constant, ...); the callers check their own inputs
  // first and word those errors for their users.
  [[nodiscard]] static Result<FeedSimulator> Create(const FeedConfig& feed, Dynamics dynamics,
                                                    FeedSimulatorOptions options);

  FeedSimulator(FeedSimulator&&) noexcept;
  FeedSimulator& operator=(FeedSimulator&&) noexcept;
  FeedSimulator(const FeedSimulator&) = delete;
  FeedSimulator& operator=(const FeedSimulator&) = delete;
  ~FeedSimulator();

  const std::string& feed_id() const { return feed_id_; }
  Micros step() const { return step_; }
  std::int64_t steps_total() const { return total_; }
  std::int64_t steps_taken() const { return next_; }
  std::int64_t samples_kept() const { return kept_; }
  bool done() const { return next_ >= total_; }
  // Offset of the step Next() takes; requires !done().
  Micros next_offset() const { return next_ * step_; }

  // Takes one step: applies the changes due at its offset, draws the gap,
  // the noise and the missing channel, formats the line, then integrates to
  // the next step. Requires !done(). kFailedPrecondition when the state is no
  // longer finite ("the state left finite values at 12m30s into the run");
  // the simulator is then finished (done() is true).
  [[nodiscard]] Result<Step> Next();

 private:
  struct State;
  FeedSimulator(std::unique_ptr<State> state, std::string feed_id, Micros step, std::int64_t total);

  std::unique_ptr<State> s_;
  std::string feed_id_;
  Micros step_{};
  std::int64_t total_ = 0;
  std::int64_t next_ = 0;
  std::int64_t kept_ = 0;
};

}  // namespace lyapcast::cli
