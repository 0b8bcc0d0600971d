// Cadence in data time: source priority, the lyapunov_fraction * T rule,
// clamping to [min_interval, max_interval], and non-positive exponents.
#include "schedule/cadence.h"

#include <gtest/gtest.h>

#include <cmath>

namespace lyapcast {
namespace {

RetrainConfig Config() {
  RetrainConfig c;
  c.lyapunov_fraction = 0.5;
  c.min_interval = 30 * kSecond;
  c.max_interval = 3600 * kSecond;
  return c;
}

TEST(ChooseExponent, TheLargestPositiveEstimateWins) {
  LyapunovEstimates e{0.1, 0.2, 0.3};
  EXPECT_EQ(ChooseExponent(e, true)->source, LyapunovSource::kData);
  EXPECT_EQ(ChooseExponent(e, true)->lambda_max, 0.3);
  const LyapunovEstimates model_fastest{0.5, 0.2, 0.3};
  EXPECT_EQ(ChooseExponent(model_fastest, true)->source, LyapunovSource::kModel);
  EXPECT_EQ(ChooseExponent(model_fastest, false)->source, LyapunovSource::kData) << "no model: its estimate is ignored";
  const LyapunovEstimates ties{0.2, 0.2, 0.2};
  EXPECT_EQ(ChooseExponent(ties, true)->source, LyapunovSource::kModel);
  EXPECT_EQ(ChooseExponent(ties, false)->source, LyapunovSource::kDynamics);
  e.data.reset();
  EXPECT_EQ(ChooseExponent(e, false)->source, LyapunovSource::kDynamics);
  e.dynamics.reset();
  EXPECT_FALSE(ChooseExponent(e, false).has_value());
  const LyapunovEstimates nan_model{std::nan(""), 0.2, std::nullopt};
  EXPECT_EQ(ChooseExponent(nan_model, true)->source, LyapunovSource::kDynamics) << "NaN is no estimate";
}

TEST(ChooseExponent, ANearZeroModelEstimateDoesNotStretchTheCadence) {
  // Seen in the demo in lockstep right after the operating-point jump: the
  // warm-started model gave T = 2 300 s, the equations 11 s.
  const LyapunovEstimates lingering{1.0 / 2300, 1.0 / 11.1, std::nullopt};
  EXPECT_EQ(ChooseExponent(lingering, true)->source, LyapunovSource::kDynamics);
  const LyapunovEstimates settled{-0.3, 0.9, 1.0};  // a fresh model whose free run settled on a cycle
  EXPECT_EQ(ChooseExponent(settled, true)->source, LyapunovSource::kData);
  const LyapunovEstimates data_only{-0.3, std::nullopt, 1.0};
  EXPECT_EQ(ChooseExponent(data_only, true)->source, LyapunovSource::kData);
  const LyapunovEstimates none_positive{-0.3, -0.1, 0.0};
  EXPECT_EQ(ChooseExponent(none_positive, true)->source, LyapunovSource::kModel) << "then max_interval";
  EXPECT_EQ(ChooseExponent(none_positive, true)->lambda_max, -0.3);
}

TEST(NextRetrain, FractionOfTheLyapunovTime) {
  // lambda = 0.01/s -> T = 100 s; half of it is 50 s, inside [30 s, 1 h].
  const CadenceDecision d = NextRetrain(Config(), {0.01, {}, {}}, true, DataTimeFromMicros(1'000'000));
  EXPECT_EQ(d.interval, 50 * kSecond);
  EXPECT_EQ(d.due, DataTimeFromMicros(1'000'000) + 50 * kSecond);
  EXPECT_NE(d.reason.find("T = 100s from the model"), std::string::npos) << d.reason;
}

TEST(NextRetrain, ClampsToTheConfiguredBounds) {
  const CadenceDecision fast = NextRetrain(Config(), {{}, 1.0, {}}, false, DataTime{});  // 0.5 s wanted
  EXPECT_EQ(fast.interval, 30 * kSecond);
  EXPECT_NE(fast.reason.find("raised to min_interval 30s"), std::string::npos) << fast.reason;
  const CadenceDecision slow = NextRetrain(Config(), {{}, {}, 1e-9}, false, DataTime{});  // years wanted
  EXPECT_EQ(slow.interval, 3600 * kSecond);
  EXPECT_NE(slow.reason.find("lowered to max_interval 1h"), std::string::npos) << slow.reason;
}

TEST(NextRetrain, NonPositiveOrMissingExponentUsesMaxInterval) {
  const CadenceDecision zero = NextRetrain(Config(), {0.0, {}, {}}, true, DataTime{});
  EXPECT_EQ(zero.interval, 3600 * kSecond);
  EXPECT_NE(zero.reason.find("not positive"), std::string::npos);
  const CadenceDecision none = NextRetrain(Config(), {}, false, DataTime{});
  EXPECT_EQ(none.interval, 3600 * kSecond);
  EXPECT_NE(none.reason.find("no Lyapunov estimate"), std::string::npos);
}

}  // namespace
}  // namespace lyapcast
