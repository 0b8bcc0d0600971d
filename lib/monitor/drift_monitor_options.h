// DriftMonitorOptions: what a DriftMonitor (monitor/drift_monitor.h) needs to
// know about its feed and how sensitive its change test is.
//
// Owned by lib/monitor; lib/config fills one from a feed's channels, step and
// `monitor` section (ToDriftMonitorOptions in config/config.h), and the
// config's monitor defaults refer to the ones here. Header-only, so lib/config
// can use the type without linking the monitor library. A plain value.
#pragma once

#include <vector>

#include "core/data_time.h"
#include "monitor/change_test.h"

namespace lyapcast {

struct DriftMonitorOptions {
  int channels = 0;   // the feed's channel count; a sample or model of another size is not scored
  Micros step{};      // the feed's model step
  // Longest composition G^k a sample is scored through when no state one
  // step before it can be formed (sparse data); the feed's model.max_gap.
  int max_gap = 8;
  // How late (data time behind the newest sample) a sample may arrive and
  // still be scored, and still serve as the state before a later sample.
  Micros reorder_window = Micros(10'000'000);
  // Per channel, how long its last value may be carried into the state
  // before a sample (the feed's `hold`); empty = never.
  std::vector<Micros> hold;
  // The change test behind the drift flag (monitor/change_test.h), in in-control
  // standard deviations of the block scores; its warm-up is DriftMonitor::kWarmupBlocks.
  double change_threshold = ChangeTestOptions{}.threshold;
  double change_drift = ChangeTestOptions{}.drift;
};

}  // namespace lyapcast
