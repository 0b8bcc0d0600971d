// SensorScreen on synthetic channels whose good readings are known: a sine
// (amplitude 1, period 2 s, sampled every 10 ms), a constant channel, and
// injected faults. Thresholds are the screen's documented constants.
#include "monitor/sensor_screen.h"

#include <gtest/gtest.h>

#include <cmath>
#include <numbers>
#include <vector>

namespace lyapcast {
namespace {

constexpr Micros kDt{10'000};

double Sine(int k) { return std::sin(std::numbers::pi * k * 0.01); }

// Two channels: a sine and a constant 5.
Sample At(int k, double a, double b = 5.0) {
  Sample s;
  s.t = DataTime{} + k * kDt;
  s.values = {a, b};
  return s;
}

TEST(SensorScreen, ConfiguredSentinelsAndRangeAreSuspectFromTheFirstReading) {
  ChannelQuality q;
  q.lo = -2;
  q.hi = 2;
  q.bad_values = {-9999};
  SensorScreen screen({q, {}});
  Sample s = At(0, -9999);
  EXPECT_EQ(screen.Screen(s), 0b01u);
  EXPECT_TRUE(s.suspect(0));
  EXPECT_TRUE(s.missing(0)) << "a suspect channel is missing for every computation";
  EXPECT_EQ(s.values[0], -9999) << "the raw reading is kept";
  Sample r = At(1, 2.5);
  EXPECT_EQ(screen.Screen(r), 0b01u);
  Sample ok = At(2, 1.5);
  EXPECT_EQ(screen.Screen(ok), 0u);
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kBadValue)], 1);
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kRange)], 1);
}

TEST(SensorScreen, UnconfiguredSentinelBurstsAreOutliersAndGoodReadingsAfterThemPass) {
  SensorScreen screen({{}, {}});
  int k = 0;
  for (; k < 1000; ++k) {
    Sample s = At(k, Sine(k));
    ASSERT_EQ(screen.Screen(s), 0u) << "good reading " << k;
  }
  // A minute's burst of -9999 then of 1e30 (well over kShiftRun readings,
  // all equal: not a level shift), on channel 0 only.
  for (int j = 0; j < 300; ++j, ++k) {
    Sample s = At(k, j < 150 ? -9999.0 : 1e30);
    EXPECT_EQ(screen.Screen(s), 0b01u) << j;
  }
  for (int j = 0; j < 500; ++j, ++k) {
    Sample s = At(k, Sine(k));
    EXPECT_EQ(screen.Screen(s), 0u) << "good reading after the burst " << j;
  }
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kOutlier)], 300);
  EXPECT_EQ(screen.counts()[1], (std::array<std::int64_t, kSuspectKinds>{})) << "the constant channel is untouched";
}

TEST(SensorScreen, ASpikeIsSuspectAndAStepThatHoldsCostsOneReading) {
  SensorScreen screen({{}, {}});
  int k = 0;
  for (; k < 1000; ++k) {
    Sample s = At(k, Sine(k));
    ASSERT_EQ(screen.Screen(s), 0u);
  }
  // The sine's rate is at most pi per second; median about 2. A one-sample
  // jump of 3 (300 per second) is a spike; the next good reading passes.
  Sample spike = At(k, Sine(k) + 3);
  EXPECT_EQ(screen.Screen(spike), 0b01u);
  ++k;
  Sample back = At(k, Sine(k));
  EXPECT_EQ(screen.Screen(back), 0u);
  ++k;
  // A step of +3 that holds: the first reading after it is suspect, the
  // following ones (close to it) pass.
  for (int j = 0; j < 50; ++j, ++k) {
    Sample s = At(k, Sine(k) + 3);
    EXPECT_EQ(screen.Screen(s), j == 0 ? 0b01u : 0u) << j;
  }
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kSpike)], 2);
}

TEST(SensorScreen, AStuckSensorIsSuspectAfterARunOfRepeatsAndFollowsItWhenItMovesAgain) {
  SensorScreen screen({{}, {}});
  int k = 0;
  for (; k < 1000; ++k) {
    Sample s = At(k, Sine(k));
    ASSERT_EQ(screen.Screen(s), 0u);
  }
  // The sensor freezes at its last reading for 5 s (500 readings): the
  // first kStuckRun - 1 repeats pass, the rest are suspect.
  const double frozen = Sine(k - 1);
  for (int j = 0; j < 500; ++j, ++k) {
    Sample s = At(k, frozen);
    EXPECT_EQ(screen.Screen(s), j + 1 >= SensorScreen::kStuckRun ? 0b01u : 0u) << j;
  }
  // It comes back: the true signal passes at once (no run of spikes), and
  // the constant channel b, which never moves, was never called stuck.
  for (int j = 0; j < 500; ++j, ++k) {
    Sample s = At(k, Sine(k));
    EXPECT_EQ(screen.Screen(s), 0u) << j;
  }
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kStuck)], 500 - SensorScreen::kStuckRun + 1);
  EXPECT_EQ(screen.counts()[0][static_cast<int>(SuspectKind::kSpike)], 0);
  EXPECT_EQ(screen.counts()[1], (std::array<std::int64_t, kSuspectKinds>{}));
  // A second freeze is caught as quickly: the first one did not teach the
  // screen that this channel repeats.
  const double frozen_again = Sine(k - 1);
  for (int j = 0; j < 100; ++j, ++k) {
    Sample s = At(k, frozen_again);
    EXPECT_EQ(screen.Screen(s), j + 1 >= SensorScreen::kStuckRun ? 0b01u : 0u) << j;
  }
}

TEST(SensorScreen, AChannelThatOftenRepeatsIsNotCalledStuck) {
  // A slow signal read through a coarse quantizer (steps of 0.05) repeats
  // most readings; long runs at its turning points are normal.
  SensorScreen screen(std::vector<ChannelQuality>(1));
  for (int k = 0; k < 5000; ++k) {
    Sample s;
    s.t = DataTime{} + k * kDt;
    s.values = {0.05 * std::round(Sine(k / 4) / 0.05)};
    ASSERT_EQ(screen.Screen(s), 0u) << k;
  }
}

TEST(SensorScreen, ALevelShiftWithVarietyIsAcceptedAfterARun) {
  SensorScreen screen({{}, {}});
  int k = 0;
  for (; k < 1000; ++k) {
    Sample s = At(k, Sine(k));
    ASSERT_EQ(screen.Screen(s), 0u);
  }
  // The process moves to around 100 (far beyond 20 robust deviations of
  // the sine, MAD about 0.7) and keeps varying: after kShiftRun outliers the
  // history restarts and the new level passes.
  int suspect = 0;
  for (int j = 0; j < 200; ++j, ++k) {
    Sample s = At(k, 100 + Sine(k));
    suspect += screen.Screen(s) != 0 ? 1 : 0;
  }
  EXPECT_LE(suspect, SensorScreen::kShiftRun + 1);
  Sample later = At(k, 100 + Sine(k));
  EXPECT_EQ(screen.Screen(later), 0u);
}

}  // namespace
}  // namespace lyapcast
