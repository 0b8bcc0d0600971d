// Tests for RosensteinLargest (Rosenstein, Collins & De Luca, Physica D 65
// (1993) 117) on series with known largest exponents: the logistic map
// r = 4 (ln 2, analytic; Sprott 2003) and Lorenz-63 x (0.9056, Sprott 2004
// table). docs/references.md "Lyapunov exponents" tolerance for time-series estimates: +-25 %.
#include "chaos/rosenstein.h"

#include <gtest/gtest.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <vector>

#include "chaos/chaos_test_util.h"

namespace lyapcast {
namespace {

using testing::LogisticSeries;
using testing::LorenzSamples;
using testing::PrintEstimate;

TEST(RosensteinTest, LogisticMapNearLn2) {
  const auto t0 = std::chrono::steady_clock::now();
  RosensteinOptions o;
  o.dimension = 2;  // a one-dimensional map: a small embedding suffices
  Result<RosensteinEstimate> r = RosensteinLargest(LogisticSeries(2000), 1.0, o);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  PrintEstimate("logistic", *r, std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  EXPECT_NEAR(r->lambda, std::log(2.0), 0.25 * std::log(2.0));
  EXPECT_EQ(r->lag, 1);  // white-ish spectrum: the autocorrelation drops at once
  EXPECT_GT(r->fit_end, r->fit_begin);
  EXPECT_GT(r->r_squared, 0.9);
  EXPECT_EQ(r->divergence.size() >= static_cast<size_t>(r->fit_end), true);
}

TEST(RosensteinTest, LorenzXNearReference) {
  const double dt = 0.01;
  const Eigen::MatrixXd s = LorenzSamples(150.0, dt);
  const auto t0 = std::chrono::steady_clock::now();
  Result<RosensteinEstimate> r = RosensteinLargest(s, 0, dt);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  PrintEstimate("lorenz x", *r, std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  EXPECT_NEAR(r->lambda, 0.9056, 0.25 * 0.9056);
  EXPECT_GT(r->lag, 1);
  EXPECT_GT(r->theiler, 10);  // a mean period of ~0.5-1 time unit is 50-100 samples
  EXPECT_GT(r->r_squared, 0.9);
}

// Explicit settings override the automatic ones, down to the smallest K.
TEST(RosensteinTest, ExplicitSettingsAreUsed) {
  RosensteinOptions o;
  o.dimension = 2;
  o.lag = 1;
  o.theiler = 10;
  o.max_steps = 5;
  Result<RosensteinEstimate> r = RosensteinLargest(LogisticSeries(2000), 1.0, o);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_EQ(r->lag, 1);
  EXPECT_EQ(r->theiler, 10);
  EXPECT_EQ(r->divergence.size(), 6u);
  EXPECT_GE(r->fit_begin, 1);
  EXPECT_LE(r->fit_end, 6);
  EXPECT_NEAR(r->lambda, std::log(2.0), 0.25 * std::log(2.0));
}

TEST(RosensteinTest, RejectsBadInput) {
  EXPECT_EQ(RosensteinLargest(LogisticSeries(50), 1.0).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(RosensteinLargest(LogisticSeries(2000), 0.0).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(RosensteinLargest(std::vector<double>(1000, 1.0), 1.0).status().code(), StatusCode::kInvalidArgument);
  std::vector<double> nan = LogisticSeries(1000);
  nan[10] = std::nan("");
  EXPECT_EQ(RosensteinLargest(nan, 1.0).status().code(), StatusCode::kInvalidArgument);
  RosensteinOptions o;
  o.dimension = 0;
  EXPECT_EQ(RosensteinLargest(LogisticSeries(2000), 1.0, o).status().code(), StatusCode::kInvalidArgument);
  o = {};
  o.max_steps = 3;  // too few steps for a line past fit_skip
  EXPECT_EQ(RosensteinLargest(LogisticSeries(2000), 1.0, o).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(RosensteinLargest(Eigen::MatrixXd::Ones(2, 500), 2, 1.0).status().code(),
            StatusCode::kInvalidArgument);
  // Long divergence horizon on a short series: too short, and the message says so.
  o = {};
  o.max_steps = 400;
  Result<RosensteinEstimate> r = RosensteinLargest(LogisticSeries(600), 1.0, o);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("too short"), std::string::npos) << r.status().message();
}

}  // namespace
}  // namespace lyapcast
