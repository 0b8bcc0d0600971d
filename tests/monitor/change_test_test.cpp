// ChangeTest: detection delay of mean steps, no false alarms on long
// stationary series at any scale, warm-up, Restart/Reset, non-finite input,
// and a Monte-Carlo check of Siegmund's ARL approximation.
#include "monitor/change_test.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

#include "monitor/normal_source.h"

namespace lyapcast {
namespace {

using testing::NormalSource;

// Feeds `n` values mean + std * N(0,1); returns the 1-based index of the
// value that raised the alarm, or 0.
long Feed(ChangeTest& test, NormalSource& normal, long n, double mean, double std) {
  for (long i = 1; i <= n; ++i) {
    if (test.Add(mean + std * normal())) return i;
  }
  return 0;
}

// Delay (1-based: the step's first value is 1) until a step of `shift`
// standard deviations is flagged, after `before` in-control values (warm-up
// included); -1 for a false alarm before the step, 0 when not flagged
// within `limit`.
long StepDelay(std::uint64_t seed, double shift, long before, long limit) {
  ChangeTest test{ChangeTestOptions{}};
  NormalSource normal(seed);
  if (Feed(test, normal, before, 0.0, 1.0) != 0) return -1;
  return Feed(test, normal, limit, shift, 1.0);
}

TEST(SiegmundArl, MatchesTheFiguresQuotedInTheHeader) {
  EXPECT_NEAR(SiegmundArl(15, 0.5, 0) / 2.1e7, 1.0, 0.01);  // in control, defaults
  EXPECT_NEAR(SiegmundArl(15, 0.5, 3), 6.39, 0.01);         // 3-sigma step
  EXPECT_NEAR(SiegmundArl(15, 0.5, 1), 30.3, 0.05);         // 1-sigma step
  EXPECT_NEAR(SiegmundArl(4, 0.5, 0), 338.1, 0.1);
  EXPECT_NEAR(SiegmundArl(4, 0.5, 0.5), 5.166 * 5.166, 1e-6);  // D = 0: h'^2
}

TEST(ChangeTest, ThreeSigmaStepIsFlaggedWithinFiftySamples) {
  // Siegmund: 6.4 on average. Measured over these 200 seeds: mean delay
  // 6.45 samples, longest 10.
  long total = 0, longest = 0;
  for (std::uint64_t seed = 1; seed <= 200; ++seed) {
    const long delay = StepDelay(seed, 3.0, 500, 50);
    ASSERT_NE(delay, -1) << "false alarm before the step, seed " << seed;
    ASSERT_NE(delay, 0) << "not flagged within 50 samples, seed " << seed;
    total += delay;
    longest = std::max(longest, delay);
  }
  const double mean = static_cast<double>(total) / 200;
  std::printf("3-sigma step: mean delay %.2f, longest %ld\n", mean, longest);
  EXPECT_GT(mean, 5.0);
  EXPECT_LT(mean, 8.0);
}

TEST(ChangeTest, OneSigmaStepIsFlaggedWithinAHundredSamplesOnMostSeeds) {
  // Siegmund: 30 on average. Measured over these 200 seeds: mean delay
  // 31.1 samples, none later than 100.
  long total = 0, late = 0, detected = 0;
  for (std::uint64_t seed = 1; seed <= 200; ++seed) {
    const long delay = StepDelay(seed, 1.0, 500, 1000);
    ASSERT_NE(delay, -1) << "false alarm before the step, seed " << seed;
    ASSERT_NE(delay, 0) << "not flagged within 1000 samples, seed " << seed;
    if (delay > 100) ++late;
    total += delay;
    ++detected;
  }
  const double mean = static_cast<double>(total) / static_cast<double>(detected);
  std::printf("1-sigma step: mean delay %.2f, %ld of 200 later than 100\n", mean, late);
  EXPECT_LE(late, 10);
  EXPECT_GT(mean, 25.0);
  EXPECT_LT(mean, 40.0);
}

TEST(ChangeTest, NoAlarmOnLongStationarySeriesAtAnyScale) {
  struct Case {
    double mean, std;
  };
  for (const Case c : {Case{0.0, 1.0}, Case{5.0, 0.01}, Case{-3e6, 250.0}}) {
    ChangeTest test{ChangeTestOptions{}};
    NormalSource normal(42);
    EXPECT_EQ(Feed(test, normal, 100'000, c.mean, c.std), 0) << "mean " << c.mean << " std " << c.std;
    EXPECT_FALSE(test.alarm());
    EXPECT_EQ(test.observations(), 100'000);
    EXPECT_NEAR(test.mean(), c.mean, 0.2 * c.std);
    EXPECT_NEAR(test.stddev() / c.std, 1.0, 0.2);
  }
}

TEST(ChangeTest, TheSameStandardizedSeriesGivesTheSameStatisticAtAnyScale) {
  ChangeTest a{ChangeTestOptions{}}, b{ChangeTestOptions{}};
  NormalSource normal(7);
  for (int i = 0; i < 400; ++i) {
    const double z = normal() + (i >= 300 ? 1.0 : 0.0);
    EXPECT_EQ(a.Add(z), b.Add(5.0 + 0.01 * z));
  }
  EXPECT_GT(a.statistic(), 0);
  EXPECT_NEAR(a.statistic(), b.statistic(), 1e-9 * a.statistic());
}

TEST(ChangeTest, NoAlarmDuringWarmupWhateverTheValues) {
  ChangeTest test{ChangeTestOptions{.threshold = 1.0, .drift = 0.0, .warmup = 50}};
  for (int i = 0; i < 50; ++i) {
    EXPECT_TRUE(test.warming_up());
    EXPECT_FALSE(test.Add(i % 2 == 0 ? 1e12 : -1e12 * i));
    EXPECT_EQ(test.statistic(), 0);
    EXPECT_FALSE(test.alarm());
  }
  EXPECT_FALSE(test.warming_up());
  EXPECT_EQ(test.observations(), 50);
}

TEST(ChangeTest, ConstantWarmupGivesAFiniteVerySensitiveTest) {
  ChangeTest test{ChangeTestOptions{.threshold = 15.0, .drift = 0.5, .warmup = 10}};
  for (int i = 0; i < 10; ++i) test.Add(2.0);
  EXPECT_DOUBLE_EQ(test.stddev(), 2e-9);  // floored at 1e-9 |mean|
  EXPECT_FALSE(test.Add(2.0));            // no change: z = 0
  EXPECT_TRUE(test.Add(2.0 + 1e-6));      // 500 "standard deviations"
  ChangeTest zero{ChangeTestOptions{.threshold = 15.0, .drift = 0.5, .warmup = 10}};
  for (int i = 0; i < 10; ++i) zero.Add(0.0);
  EXPECT_GT(zero.stddev(), 0);
  EXPECT_FALSE(zero.Add(-1.0));  // z = -inf: S stays 0
  EXPECT_EQ(zero.statistic(), 0);
  EXPECT_TRUE(zero.Add(1.0));    // z = +inf
}

TEST(ChangeTest, AlarmIsRaisedOnceAndFrozenUntilRestart) {
  ChangeTest test{ChangeTestOptions{}};
  NormalSource normal(3);
  ASSERT_EQ(Feed(test, normal, 300, 0.0, 1.0), 0);
  const long at = Feed(test, normal, 100, 4.0, 1.0);
  ASSERT_GT(at, 0);
  EXPECT_TRUE(test.alarm());
  const double frozen = test.statistic();
  EXPECT_GT(frozen, 15.0);
  for (int i = 0; i < 20; ++i) EXPECT_FALSE(test.Add(10.0)) << "already alarmed: true only once";
  EXPECT_EQ(test.statistic(), frozen);
  EXPECT_TRUE(test.alarm());
}

TEST(ChangeTest, RestartKeepsTheEstimateResetForgetsIt) {
  ChangeTest test{ChangeTestOptions{}};
  NormalSource normal(11);
  ASSERT_EQ(Feed(test, normal, 300, 0.0, 1.0), 0);
  const double mean = test.mean(), std = test.stddev();
  ASSERT_GT(Feed(test, normal, 100, 3.0, 1.0), 0);

  test.Restart();
  EXPECT_FALSE(test.alarm());
  EXPECT_EQ(test.statistic(), 0);
  EXPECT_FALSE(test.warming_up());
  EXPECT_EQ(test.mean(), mean);
  EXPECT_EQ(test.stddev(), std);
  // The process is still shifted: against the kept estimate it alarms again.
  const long again = Feed(test, normal, 100, 3.0, 1.0);
  EXPECT_GT(again, 0);
  EXPECT_LE(again, 50);

  test.Reset();
  EXPECT_FALSE(test.alarm());
  EXPECT_TRUE(test.warming_up());
  EXPECT_EQ(test.observations(), 0);
  // The shifted level is the new normal: no alarm.
  EXPECT_EQ(Feed(test, normal, 20'000, 3.0, 1.0), 0);
  EXPECT_NEAR(test.mean(), 3.0, 0.3);
}

TEST(ChangeTest, NonFiniteValuesAreIgnoredAndCounted) {
  ChangeTest test{ChangeTestOptions{.threshold = 15.0, .drift = 0.5, .warmup = 5}};
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double inf = std::numeric_limits<double>::infinity();
  for (double x : {1.0, nan, 2.0, inf, 1.0, -inf, 2.0, 1.0}) EXPECT_FALSE(test.Add(x));
  EXPECT_EQ(test.observations(), 5);
  EXPECT_EQ(test.ignored(), 3);
  EXPECT_FALSE(test.warming_up());
  EXPECT_DOUBLE_EQ(test.mean(), 1.4);
  const double s = test.statistic();
  EXPECT_FALSE(test.Add(nan));
  EXPECT_EQ(test.statistic(), s);
  test.Reset();
  EXPECT_EQ(test.ignored(), 0);
}

TEST(ChangeTest, WarmupBelowTwoCountsAsTwo) {
  ChangeTest test{ChangeTestOptions{.threshold = 15.0, .drift = 0.5, .warmup = 0}};
  EXPECT_TRUE(test.warming_up());
  test.Add(1.0);
  EXPECT_TRUE(test.warming_up());
  test.Add(3.0);
  EXPECT_FALSE(test.warming_up());
  EXPECT_DOUBLE_EQ(test.stddev(), std::sqrt(2.0));
}

// Monte-Carlo check of Siegmund's approximation (the header's formula, from
// D. Siegmund, Sequential Analysis, Springer 1985) at a small threshold so
// runs are short: h = 4, k = 0.5 gives ARL0 = 338 in control and 8.3 for a
// 1-sigma shift. The in-control estimate comes from a long warm-up (1e5
// values: mean and std errors ~0.3 %, which move the ARL by ~3 %), then
// each run is ended by an alarm and Restart(). Run lengths are roughly
// geometric, so 2000 runs give a standard error of ~2 % of the mean.
// Measured: 318.6 (-6 %) in control, 8.4 (+1 %) for the 1-sigma shift.
TEST(ChangeTest, AverageRunLengthMatchesSiegmundsApproximation) {
  const ChangeTestOptions options{.threshold = 4.0, .drift = 0.5, .warmup = 100'000};
  for (const double shift : {0.0, 1.0}) {
    ChangeTest test(options);
    NormalSource normal(2024);
    ASSERT_EQ(Feed(test, normal, options.warmup, 0.0, 1.0), 0);
    constexpr int kRuns = 2000;
    double total = 0;
    for (int run = 0; run < kRuns; ++run) {
      const long length = Feed(test, normal, 1'000'000, shift, 1.0);
      ASSERT_GT(length, 0);
      total += static_cast<double>(length);
      test.Restart();
    }
    const double measured = total / kRuns, predicted = SiegmundArl(options.threshold, options.drift, shift);
    std::printf("h = 4, k = 0.5, shift %g: mean run length %.1f, Siegmund %.1f\n", shift, measured, predicted);
    EXPECT_NEAR(measured / predicted, 1.0, 0.25) << "shift " << shift;
  }
}

}  // namespace
}  // namespace lyapcast
