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

TEST(ResampleToGrid, ReadsJitteredSamplesBetweenTheirNeighbours) {
  // Samples at 0, 120, 180, 400 ms; step 100 ms, so interpolation spans up
  // to 150 ms and the nearest-sample tolerance is 25 ms. Grid 0..400 ms:
  //   0: exact 0;
  //   100: between 0 (v 0) and 120 (v 1), span 120 -> 1 * 100/120 = 0.8333;
  //   200: between 180 (v 2) and 400 (v 3), span 220 > 150; nearest 180 is
  //        20 ms away -> 2;
  //   300: same bracket, nearest is 120 ms away -> missing;
  //   400: exact 3.
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep + Micros(20'000), 1), At(2 * kStep - Micros(20'000), 2),
                           At(4 * kStep, 3)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.size(), 5u);
  EXPECT_EQ(g.t0, DataTime{});
  EXPECT_EQ(g.segments(), 1u);
  EXPECT_EQ(g.present, (std::vector<std::uint8_t>{1, 1, 1, 0, 1}));
  EXPECT_NEAR(g.row(1)[0], 100.0 / 120.0, 1e-12);
  EXPECT_NEAR(g.row(1)[1], -100.0 / 120.0, 1e-12);
  EXPECT_EQ(g.row(2)[0], 2.0);
  EXPECT_TRUE(std::isnan(g.row(3)[0]));
  EXPECT_EQ(g.mask[3], ~std::uint64_t{0});
  EXPECT_EQ(g.row(4)[0], 3.0);
  EXPECT_EQ(g.time(4), DataTime{} + 4 * kStep);
  EXPECT_EQ(g.interpolated, 2);  // two channels at 100 ms
  EXPECT_EQ(g.nearest, 2);       // two channels at 200 ms
  EXPECT_EQ(g.unused, 0);
}

TEST(ResampleToGrid, ASampleOffTheGridAfterAPauseReanchors) {
  // 0, 100, then 340 ms: 240 ms after the previous sample (a pause longer
  // than 150 ms) and 40 ms off the running grid (> 25 ms): a new segment.
  std::vector<Sample> s = {At(Micros{}, 0), At(kStep, 1), At(Micros(340'000), 2), At(Micros(440'000), 3)};
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.size(), 4u);
  EXPECT_EQ(g.segment_begins, (std::vector<std::size_t>{0, 2}));
  EXPECT_EQ(g.time(2), DataTime{} + Micros(340'000));
  EXPECT_EQ(g.row(3)[0], 3.0);
}

TEST(ResampleToGrid, OversampledDataAreReadAtEveryStep) {
  // Five samples per step (every 20 ms, value = time in ms), offset by 7 ms
  // from the first one's grid... the grid anchors at the first sample, so
  // grid points fall 100 ms apart from 7 ms and each is read between the
  // two samples bracketing it: the value equals the time exactly.
  std::vector<Sample> s;
  for (int k = 0; k < 51; ++k) s.push_back(At(Micros(7'000 + 20'000 * k), 7.0 + 20.0 * k));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.size(), 11u);  // 7 ms .. 1007 ms
  EXPECT_EQ(g.segments(), 1u);
  for (std::size_t i = 0; i < g.size(); ++i) {
    EXPECT_TRUE(g.complete(i));
    EXPECT_NEAR(g.row(i)[0], 7.0 + 100.0 * static_cast<double>(i), 1e-9);
  }
}

TEST(ResampleToGrid, APhaseShiftAfterAnOutageStartsANewSegment) {
  // 0..4 steps, an outage, then samples resume half a step off the old grid
  // (at 20.5 steps). The old grid would put every later sample 50 ms from a
  // grid point (off the grid); a new segment anchored at 20.5 steps keeps
  // them all.
  std::vector<Sample> s;
  for (int i = 0; i < 5; ++i) s.push_back(At(i * kStep, i));
  for (int i = 0; i < 10; ++i) s.push_back(At(20 * kStep + kStep / 2 + i * kStep, 100 + i));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  ASSERT_EQ(g.segments(), 2u);
  EXPECT_EQ(g.segment_begins[1], 5u);
  ASSERT_EQ(g.size(), 15u);
  EXPECT_EQ(g.time(5), DataTime{} + 20 * kStep + kStep / 2);
  EXPECT_EQ(g.segment_end(0), 5u);
  EXPECT_EQ(g.segment_end(7), 15u);
  for (std::size_t i = 0; i < g.size(); ++i) EXPECT_TRUE(g.complete(i)) << i;
  EXPECT_EQ(g.unused, 0);
  // Trajectories never cross the boundary: 4 (last of the first segment) has none.
  const TrajectorySet t = BuildTrajectories(g, {1, 8, 0.0});
  ASSERT_EQ(t.train.size(), 13u);  // 0..3 and 5..13
  for (const Trajectory& tr : t.train) EXPECT_NE(tr.start, 4);
}

TEST(ResampleToGrid, SparseDataLandOnEveryFifthStep) {
  // One sample every 5 steps with +-10 ms jitter: nothing to interpolate
  // (brackets span 500 ms), each sample is the nearest to its grid point,
  // and the four steps between are gaps trained through G^5.
  std::vector<Sample> s;
  for (int i = 0; i < 6; ++i) s.push_back(At(5 * i * kStep + Micros(i % 2 == 0 ? 10'000 : -10'000), i));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  EXPECT_EQ(g.segments(), 1u);
  ASSERT_EQ(g.size(), 26u);
  for (std::size_t i = 0; i < g.size(); ++i) EXPECT_EQ(g.present[i] != 0, i % 5 == 0) << i;
  const TrajectorySet t = BuildTrajectories(g, {1, 8, 0.0});
  ASSERT_EQ(t.train.size(), 5u);
  EXPECT_EQ(t.train[0].horizon, 5);
  EXPECT_EQ(t.gap_pairs, 5);
}

TEST(ResampleToGrid, ASlowlyDriftingClockNeverLosesDenseData) {
  // A logger whose clock runs 1 % slow: samples every 101 ms. After 25
  // samples they are a quarter step off the grid laid at the first one;
  // dense data are read between samples, so every grid point is formed.
  std::vector<Sample> s;
  for (int k = 0; k < 200; ++k) s.push_back(At(Micros(101'000 * k), k));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}});
  EXPECT_EQ(g.segments(), 1u);
  ASSERT_EQ(g.size(), 202u);  // 0 .. 20.1 s; the last point is 1 ms past the last sample
  for (std::size_t i = 0; i + 1 < g.size(); ++i) {
    ASSERT_TRUE(g.complete(i)) << i;
    EXPECT_NEAR(g.row(i)[0], static_cast<double>(i) * 100.0 / 101.0, 1e-9);
  }
}

TEST(ResampleToGrid, ASlowChannelIsCarriedIntoStatesButIsNoTarget) {
  // Channel 1 is read once at 0 (a lab assay); channel 0 every step. With a
  // hold of 350 ms channel 1 is carried to 100..300 ms: those states are
  // complete (inputs) but channel 1 is no target there; at 400 ms it is
  // missing (older than the hold).
  std::vector<Sample> s = {At(Micros{}, 0)};
  for (int i = 1; i <= 4; ++i) s.push_back(At(i * kStep, i, 0b10));
  const GridSeries g = ResampleToGrid(s, 2, {kStep, Micros{}, Micros{}, {Micros{}, Micros(350'000)}});
  ASSERT_EQ(g.size(), 5u);
  for (std::size_t i = 0; i < 4; ++i) EXPECT_TRUE(g.complete(i)) << i;
  EXPECT_FALSE(g.complete(4));
  EXPECT_EQ(g.row(3)[1], -0.0) << "the value read at 0";
  EXPECT_EQ(g.carried[0], 0u);
  EXPECT_EQ(g.carried[2], 0b10u);
  EXPECT_EQ(g.target_missing(2), 0b10u);
  EXPECT_EQ(g.carried_values, 3);
  const TrajectorySet t = BuildTrajectories(g, {1, 8, 0.0});
  EXPECT_EQ(t.train.size(), 4u) << "every complete state starts a trajectory";
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
