// HealthLevels: the alert and alarm levels EvaluateHealth judges a feed
// against (monitor/health.h).
//
// Owned by lib/monitor; the config section feeds[].health maps onto it
// (lib/config aliases HealthConfig to it), so the defaults below are the
// config's defaults too. `lyapcast check` overrides them from its command
// line. Header-only, so lib/config can use the type without linking the
// monitor library. A plain value.
#pragma once

#include <optional>

#include "core/data_time.h"

namespace lyapcast {

struct HealthLevels {
  double drift_alert = 2.0;  // drift ratio; alert <= alarm
  double drift_alarm = 5.0;
  Micros data_age_alert = 30 * kSecond;  // wall time since the last sample arrived; alert <= alarm
  Micros data_age_alarm = 5 * 60 * kSecond;
  // Lyapunov times of data since the model's training chunk. Unset: derived
  // from the retrain cadence (ModelAgeInForce in monitor/health.h).
  std::optional<double> model_age_alert_lyapunov;
  std::optional<double> model_age_alarm_lyapunov;
};

}  // namespace lyapcast
