// Tests for PredictabilityHorizon: (1/lambda) ln(tol/e0), the linear-growth
// estimate of docs/references.md ("Predictability horizon"), and its edge cases
// from docs/design.md ("Lyapunov time and cadence").
#include "chaos/horizon.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

namespace lyapcast {
namespace {

TEST(HorizonTest, LinearGrowthEstimate) {
  std::string reason;
  const std::optional<double> h = PredictabilityHorizon(0.9056, 1e-3, 0.5, &reason);
  ASSERT_TRUE(h.has_value()) << reason;
  EXPECT_NEAR(*h, std::log(500.0) / 0.9056, 1e-12);
  // One e-folding of error per Lyapunov time.
  EXPECT_NEAR(*PredictabilityHorizon(2.0, 1.0, std::exp(1.0), nullptr), 0.5, 1e-15);
}

TEST(HorizonTest, ZeroWhenAlreadyOutOfTolerance) {
  EXPECT_EQ(PredictabilityHorizon(1.0, 0.5, 0.5, nullptr), 0.0);
  EXPECT_EQ(PredictabilityHorizon(1.0, 2.0, 0.5, nullptr), 0.0);
}

TEST(HorizonTest, NoHorizonWithoutPositiveExponent) {
  std::string reason;
  EXPECT_FALSE(PredictabilityHorizon(0.0, 1e-3, 0.5, &reason).has_value());
  EXPECT_NE(reason.find("not positive"), std::string::npos) << reason;
  reason.clear();
  EXPECT_FALSE(PredictabilityHorizon(-0.3, 1e-3, 0.5, &reason).has_value());
  EXPECT_FALSE(reason.empty());
  reason.clear();
  EXPECT_FALSE(PredictabilityHorizon(std::numeric_limits<double>::quiet_NaN(), 1e-3, 0.5, &reason).has_value());
  EXPECT_NE(reason.find("not finite"), std::string::npos) << reason;
  EXPECT_FALSE(PredictabilityHorizon(std::numeric_limits<double>::infinity(), 1e-3, 0.5, nullptr).has_value());
}

TEST(HorizonTest, BadErrorsHaveReasons) {
  std::string reason;
  EXPECT_FALSE(PredictabilityHorizon(1.0, 0.0, 0.5, &reason).has_value());
  EXPECT_NE(reason.find("zero"), std::string::npos) << reason;
  EXPECT_FALSE(PredictabilityHorizon(1.0, -1.0, 0.5, &reason).has_value());
  EXPECT_FALSE(PredictabilityHorizon(1.0, 1e-3, 0.0, &reason).has_value());
  EXPECT_FALSE(PredictabilityHorizon(1.0, std::numeric_limits<double>::quiet_NaN(), 0.5, &reason).has_value());
}

}  // namespace
}  // namespace lyapcast
