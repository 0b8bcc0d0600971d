// Wall time: the machine's real-time clock, used only for data age, process
// health and the future-skew check, never for cadence (docs/design.md "Time").
#pragma once

#include <chrono>

#include "core/data_time.h"

namespace lyapcast {

// Microseconds since the Unix epoch by the system clock.
inline DataTime WallNowMicros() {
  return std::chrono::duration_cast<std::chrono::microseconds>(std::chrono::system_clock::now().time_since_epoch())
      .count();
}

}  // namespace lyapcast
