// DynamicsSpec: what Dynamics::Compile (physics/dynamics.h) compiles -- a
// feed's known right-hand side as text, before any parsing.
//
// Owned by lib/physics; lib/config builds one from a feed's `dynamics` section
// (ToDynamicsSpec in config/config.h). Header-only, so lib/config can use the
// type without linking muparser. A plain value; Compile checks it.
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "core/data_time.h"

namespace lyapcast {

// One unit of model time in data time unless given: the default of
// dynamics.time_unit (lib/config refers to this constant).
inline constexpr Micros kDefaultModelTimeUnit = kSecond;

struct DynamicsSpec {
  std::string feed_id;                // names the feed in error messages
  std::vector<std::string> channels;  // the feed's channels, in order (the expression variables)
  // One expression per channel, in channel order: (channel, expression).
  std::vector<std::pair<std::string, std::string>> equations;
  std::vector<std::pair<std::string, double>> constants;  // (name, value), names unique
  Micros time_unit = kDefaultModelTimeUnit;               // one unit of model time in data time; > 0
};

}  // namespace lyapcast
