// Wall time: the machine's real-time clock, used only for data age, model
// age, process uptime and the future-skew check, never for cadence
// (docs/design.md "Time").
#pragma once

#include <chrono>

#include "core/data_time.h"

namespace lyapcast {

// Now by the system clock.
inline WallTime WallNow() {
  return WallTimeFromMicros(
      std::chrono::duration_cast<Micros>(std::chrono::system_clock::now().time_since_epoch()).count());
}

}  // namespace lyapcast
