// ForecastModel and NeuralFlowMap: the seam gives exactly the flow map's
// numbers (a float free run through Step equals one kept in float), StepBatch
// and Jacobian agree with the network, roles are checked, and Rollout flags
// the first non-finite value without stopping.
#include "learn/forecast_model.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

namespace lyapcast {
namespace {

FlowMap<double> RandomMap() {
  auto created = FlowMap<double>::Create(3, {8}, Activation::kTanh, 0.05);
  EXPECT_TRUE(created.ok()) << created.status().ToString();
  FlowMap<double> map = std::move(created).value();
  map.InitRandom(11);
  EXPECT_TRUE(map.SetNormalization(Eigen::Vector3d{0.5, -1.0, 2.0}, Eigen::Vector3d{1.5, 0.7, 2.0},
                                   Eigen::Vector3d{3.0, 1.0, 0.5})
                  .ok());
  return map;
}

TEST(NeuralFlowMap, ShapeFamilyAndErrorScale) {
  const NeuralFlowMap<double> model(RandomMap());
  EXPECT_EQ(model.family(), "neural_flow_map");
  EXPECT_EQ(model.shape().channels, 3);
  EXPECT_EQ(model.shape().states(), 3);
  EXPECT_EQ(model.shape().roles, AllStateRoles(3));
  EXPECT_DOUBLE_EQ(model.shape().dt, 0.05);
  EXPECT_EQ(model.error_scale(), Eigen::Vector3d(1.5, 0.7, 2.0));
  EXPECT_STREQ(ChannelRoleName(ChannelRole::kState), "state");
}

TEST(NeuralFlowMap, CreateChecksTheNetworkAndTheRoles) {
  EXPECT_EQ(NeuralFlowMap<float>::Create(FlowMap<float>(), {}).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(NeuralFlowMap<double>::Create(RandomMap(), AllStateRoles(2)).status().code(),
            StatusCode::kInvalidArgument);
  auto ok = NeuralFlowMap<double>::Create(RandomMap(), AllStateRoles(3));
  ASSERT_TRUE(ok.ok()) << ok.status().ToString();
  EXPECT_EQ(NeuralNetworkOf<double>(**ok), &(*ok)->flow_map());
  EXPECT_EQ(NeuralNetworkOf<float>(**ok), nullptr);
}

// The daemon served forecasts by iterating FlowMap<float>::Forward on a float
// column; the seam must give the same bits.
TEST(NeuralFlowMap, FloatRolloutEqualsAFloatLoop) {
  const FlowMap<float> map = RandomMap().Cast<float>();
  const NeuralFlowMap<float> model(map);
  const Eigen::Vector3d start(0.3, -0.8, 1.7);
  const FreeRun run = Rollout(model, start, 50);
  ASSERT_EQ(run.states.cols(), 50);
  EXPECT_EQ(run.first_non_finite, -1);
  FlowMap<float>::Mat x = start.cast<float>(), y;
  FlowMapCache<float> cache;
  for (int k = 0; k < 50; ++k) {
    map.Forward(x, &y, &cache);
    x = y;
    for (int c = 0; c < 3; ++c) ASSERT_EQ(run.states(c, k), static_cast<double>(x(c, 0))) << k;
  }
}

TEST(NeuralFlowMap, StepBatchAndJacobianAgreeWithTheNetwork) {
  const FlowMap<double> map = RandomMap();
  const NeuralFlowMap<double> model(map);
  auto scratch = model.NewScratch();
  Eigen::MatrixXd X(3, 4), Y;
  X << 0.1, 0.2, -0.3, 1.0, -1.0, 0.5, 0.0, 2.0, 1.5, -0.5, 0.25, 0.0;
  model.StepBatch(X, &Y, *scratch);
  ASSERT_EQ(Y.cols(), 4);
  for (int b = 0; b < 4; ++b) {
    Eigen::VectorXd next;
    model.Step(X.col(b), &next, *scratch);
    EXPECT_LT((next - Y.col(b)).norm(), 1e-14) << b;
  }
  Eigen::MatrixXd J, expected;
  model.Jacobian(X.col(0), &J, *scratch);
  map.Jacobian(Eigen::VectorXd(X.col(0)), &expected);
  EXPECT_LT((J - expected).norm(), 1e-14);
}

TEST(Rollout, ContinuesPastNonFiniteValuesAndFlagsTheFirst) {
  const NeuralFlowMap<float> model(RandomMap().Cast<float>());
  const double inf = std::numeric_limits<double>::infinity();
  const FreeRun run = Rollout(model, Eigen::Vector3d(inf, 0.0, 0.0), 5);
  EXPECT_EQ(run.states.cols(), 5);  // never cut short: one point per step
  EXPECT_EQ(run.first_non_finite, 0);
  EXPECT_EQ(Rollout(model, Eigen::Vector3d(0.0, 0.0, 0.0), 0).states.cols(), 0);
}

}  // namespace
}  // namespace lyapcast
