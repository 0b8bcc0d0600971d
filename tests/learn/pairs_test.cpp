// Resampling onto the model-step grid and gap-aware trajectories. Expected
// values are worked out by hand in the comments beside each case.
#include "learn/pairs.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

namespace lyapcast {
namespace {

constexpr Micros kStep{100'000};  // 0.1 s

// A sample `t` after the epoch.
Sample At(Micros t, double v, std::uint64_t mask = 0) {
  Sample s{DataTime{} + t, {v, -v}, mask};
  if (mask & 1U) s.values[0] = std::nan("");
  if (mask & 2U) s.values[1] = std::nan("");
  return s;
}

std::vector<Sample> Regular(int n, Micros t0 = Micros(1'000'000)) {
  std::vector<Sample> out;
  for (int i = 0; i < n; ++i) out.push_back(At(t0 + i * kStep, i));
  return out;
}

TEST(ResampleToGrid, PutsJitteredSamplesOnTheirNearestGridPoint) {
  // Jitter of 20 ms is within the default tolerance step/4 = 25 ms; 40 ms is not.
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep + Micros(20'000), 1), At(2 * kStep - Micros(20'000), 2), At(3 * kStep + Micros(40'000), 3),
                           At(4 * kStep, 4)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.size(), 5u);
  EXPECT_EQ(g.t0, DataTime{});
  EXPECT_EQ(g.present, (std::vector<std::uint8_t>{1, 1, 1, 0, 1}));
  EXPECT_EQ(g.off_grid, 1);
  EXPECT_EQ(g.row(2)[0], 2.0);
  EXPECT_EQ(g.row(2)[1], -2.0);
  EXPECT_TRUE(std::isnan(g.row(3)[0]));
  EXPECT_EQ(g.time(4), DataTime{} + 4 * kStep);
}

TEST(ResampleToGrid, KeepsTheNearerOfTwoSamplesForOneGridPoint) {
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep - Micros(10'000), 1), At(kStep + Micros(5'000), 2)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.size(), 2u);
  EXPECT_EQ(g.collisions, 1);
  EXPECT_EQ(g.row(1)[0], 2.0);
}

TEST(ResampleToGrid, CarriesMissingChannelMasks) {
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep, 1, 0b10)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  EXPECT_TRUE(g.complete(0));
  EXPECT_FALSE(g.complete(1));
  EXPECT_EQ(g.mask[1], 0b10u);
  EXPECT_EQ(g.row(1)[0], 1.0);
  EXPECT_TRUE(std::isnan(g.row(1)[1]));
}

TEST(BuildTrajectories, ContiguousDataGivesRolloutsThatStopBeforeValidation) {
  // 20 grid points, validation 0.2 -> the newest 4 (16..19) validate.
  const GridSeries g = ResampleToGrid(Regular(20), 2, {kStep, Micros{}});
  const TrajectorySet t = BuildTrajectories(g, {4, 8, 0.2});
  EXPECT_EQ(t.validation_begin, 16u);
  // Training starts 0..14; horizons 4 until the cut at index 15: start 12 -> 3, 13 -> 2, 14 -> 1.
  ASSERT_EQ(t.train.size(), 15u);
  EXPECT_EQ(t.train[0].start, 0);
  EXPECT_EQ(t.train[0].horizon, 4);
  EXPECT_EQ(t.train[12].horizon, 3);
  EXPECT_EQ(t.train[14].horizon, 1);
  for (const Trajectory& tr : t.train) EXPECT_LT(tr.start + tr.horizon, 16) << "never reaches validation";
  // Validation starts 16..18, inside the validation span.
  ASSERT_EQ(t.validation.size(), 3u);
  EXPECT_EQ(t.validation[0].start, 16);
  EXPECT_EQ(t.validation[0].horizon, 3);
  EXPECT_EQ(t.gap_pairs, 0);
}

TEST(BuildTrajectories, AGapGivesAKStepPairAndLongGapsAreSkipped) {
  // Present: 0,1,2, then 6 (gap of 3 missing -> k = 4), then 16 (gap of 9 > max_gap 8), 17..29.
  std::vector<Sample> s;
  for (int i : {0, 1, 2, 6, 16, 17, 18, 19, 20, 21, 22, 23, 24, 25, 26, 27, 28, 29}) s.push_back(At(i * kStep, i));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  const TrajectorySet t = BuildTrajectories(g, {2, 8, 0.0});
  ASSERT_GE(t.train.size(), 3u);
  EXPECT_EQ(t.train[0].start, 0);
  EXPECT_EQ(t.train[0].horizon, 2);  // contiguous: rollout 2
  EXPECT_EQ(t.train[2].start, 2);
  EXPECT_EQ(t.train[2].horizon, 4);  // 2 -> 6 through G^4
  EXPECT_EQ(t.train[3].start, 16);   // 6 -> 16 needs 10 steps > max_gap: skipped
  EXPECT_EQ(t.skipped_gaps, 1);
  EXPECT_EQ(t.gap_pairs, 1);
}

TEST(BuildTrajectories, IncompleteInputsAreNotStartsButStillTargets) {
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep, 1, 0b01), At(2 * kStep, 2)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  const TrajectorySet t = BuildTrajectories(g, {2, 8, 0.0});
  ASSERT_EQ(t.train.size(), 1u);  // from 0 only; point 1 lacks a channel so it is no input
  EXPECT_EQ(t.train[0].start, 0);
  EXPECT_EQ(t.train[0].horizon, 2);
}

TEST(BuildTrajectories, EmptyAndTinySeries) {
  EXPECT_TRUE(BuildTrajectories(ResampleToGrid({}, 2, {kStep, Micros{}}), {}).train.empty());
  EXPECT_TRUE(BuildTrajectories(ResampleToGrid(Regular(1), 2, {kStep, Micros{}}), {}).train.empty());
}

}  // namespace
}  // namespace lyapcast
