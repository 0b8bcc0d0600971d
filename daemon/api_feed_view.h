// One consistent look at a feed for the routes: its window, schedule, drift
// figures, active model, chosen Lyapunov exponent and health verdict, and
// their JSON forms (docs/http-api.md).
#pragma once

#include "runtime/feed_runtime.h"

#include <memory>
#include <optional>

#include "api.h"
#include "api_common.h"
#include "monitor/drift_monitor.h"
#include "monitor/health.h"
#include "schedule/scheduler.h"
#include "store/window_store.h"

namespace lyapcast::api {

// One channel's reporting, against the feed's newest sample (data time).
struct ChannelView {
  std::optional<DataTime> last;  // its newest usable reading since the daemon started
  std::optional<Micros> age;     // newest sample - last; none without a reading
  Micros period{};               // feeds[].period; 0: none declared
  bool silent = false;           // ChannelSilent (monitor/health.h)
};

struct FeedView {
  std::uint32_t index = 0;
  const FeedConfig* config = nullptr;
  FeedExtent extent;
  FeedSchedule schedule;
  DriftSnapshot drift;
  std::shared_ptr<const ActiveModel> model;
  std::optional<ChosenExponent> exponent;  // the one the cadence paces by
  std::optional<double> since_training_lyapunov_times;
  ModelAgeThresholds model_age;  // the model-age levels in force (configured or derived)
  std::vector<FeedRuntime::SuspectChannel> suspects;  // per channel, from the sensor screen
  std::vector<ChannelView> channels;                  // per channel (feed order)
  HealthResult health;
};

FeedView ViewFeed(const ApiContext& c, std::uint32_t feed, WallTime wall_now);

json ModelJson(const ModelRecord& r);    // without the file
json JobJson(const Config& config, const JobInfo& j);
json StalenessJson(const FeedView& v);
json StatusJson(const ApiContext& c, const FeedView& v);
json ThresholdsJson(const HealthConfig& h, const ModelAgeThresholds& model_age);

}  // namespace lyapcast::api
