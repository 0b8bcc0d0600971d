// MakeForecast: the points are the model's free run stamped with data
// times, the horizon follows chaos/horizon.h, points past it are flagged,
// and bad requests are refused.
#include "runtime/forecast.h"

#include <gtest/gtest.h>

#include <cmath>

#include "chaos/horizon.h"

namespace lyapcast {
namespace {

constexpr Micros kStep{500'000};
const DataTime kFrom = DataTime{} + 1'700'000'000 * kSecond;

// A float flow map with zero weights but a fixed last-layer bias: G(x) =
// x + dt * S * b, a constant drift per step, so the points are known.
std::shared_ptr<const ForecastModel> DriftModel() {
  auto created = FlowMap<float>::Create(2, {4}, Activation::kTanh, 0.5);
  EXPECT_TRUE(created.ok()) << created.status().ToString();
  FlowMap<float> map = std::move(created).value();
  // Dynamic-size vectors: fixed-size ones trip GCC 12's -Wstringop-overread
  // false positive inside Eigen's AVX-512 stores.
  Eigen::VectorXf zero = Eigen::VectorXf::Zero(2), one = Eigen::VectorXf::Ones(2), scale(2), bias(2);
  scale << 2.0f, 4.0f;
  bias << 0.25f, -0.5f;
  EXPECT_TRUE(map.SetNormalization(zero, one, scale).ok());
  map.network().b(map.network().layers() - 1) = bias;
  return std::make_shared<const NeuralFlowMap<float>>(std::move(map));
}

ForecastRequest Request(std::int64_t steps) {
  ForecastRequest r;
  r.from = kFrom;
  r.start = {1.0, 2.0};
  r.step = kStep;
  r.steps = steps;
  r.lambda_max = 0.5;
  r.e0 = 0.01;
  r.tol = 0.5;
  return r;
}

TEST(MakeForecast, PointsAreTheFreeRunOnTheDataGrid) {
  const auto model = DriftModel();
  auto f = MakeForecast(*model, Request(4));
  ASSERT_TRUE(f.ok()) << f.status().ToString();
  EXPECT_EQ(f->from, kFrom);
  EXPECT_EQ(f->start, (std::vector<double>{1.0, 2.0}));
  ASSERT_EQ(f->points.size(), 4u);
  const FreeRun run = Rollout(*model, Eigen::Vector2d(1.0, 2.0), 4);
  for (std::size_t k = 0; k < 4; ++k) {
    const ForecastPoint& p = f->points[k];
    EXPECT_EQ(p.t, kFrom + static_cast<std::int64_t>(k + 1) * kStep);
    // dt * S * b per step: (0.5 * 2 * 0.25, 0.5 * 4 * -0.5) = (0.25, -1).
    EXPECT_NEAR(p.values[0], 1.0 + 0.25 * static_cast<double>(k + 1), 1e-6);
    EXPECT_NEAR(p.values[1], 2.0 - 1.0 * static_cast<double>(k + 1), 1e-6);
    EXPECT_EQ(p.values[0], run.states(0, static_cast<Eigen::Index>(k)));  // the one rollout, bit for bit
    EXPECT_EQ(p.values[1], run.states(1, static_cast<Eigen::Index>(k)));
  }
}

TEST(MakeForecast, HorizonAndBeyondFlags) {
  const auto model = DriftModel();
  auto f = MakeForecast(*model, Request(40));
  ASSERT_TRUE(f.ok()) << f.status().ToString();
  const double expected = std::log(0.5 / 0.01) / 0.5;  // 7.82 s
  ASSERT_TRUE(f->horizon.seconds);
  EXPECT_DOUBLE_EQ(*f->horizon.seconds, expected);
  EXPECT_DOUBLE_EQ(*f->horizon.lyapunov_times, expected * 0.5);
  EXPECT_TRUE(f->horizon.reason.empty());
  EXPECT_EQ(f->horizon.e0, 0.01);
  EXPECT_EQ(f->horizon.tol, 0.5);
  for (const ForecastPoint& p : f->points) {
    EXPECT_EQ(p.beyond_horizon, Seconds(p.t - kFrom) > expected) << Seconds(p.t - kFrom);
  }
  EXPECT_FALSE(f->points[14].beyond_horizon);  // 7.5 s
  EXPECT_TRUE(f->points[15].beyond_horizon);   // 8 s
}

TEST(MakeForecast, NoHorizonGivesAReasonAndNoFlags) {
  const auto model = DriftModel();
  ForecastRequest r = Request(5);
  r.lambda_max.reset();
  auto f = MakeForecast(*model, r);
  ASSERT_TRUE(f.ok());
  EXPECT_FALSE(f->horizon.seconds);
  EXPECT_EQ(f->horizon.reason, "no Lyapunov exponent estimate yet");
  for (const ForecastPoint& p : f->points) EXPECT_FALSE(p.beyond_horizon);

  r.lambda_max = -0.1;  // errors do not grow: PredictabilityHorizon's reason
  f = MakeForecast(*model, r);
  ASSERT_TRUE(f.ok());
  std::string why;
  EXPECT_FALSE(PredictabilityHorizon(-0.1, r.e0, r.tol, &why));
  EXPECT_EQ(f->horizon.reason, why);
  EXPECT_FALSE(f->horizon.lyapunov_times);

  r = Request(5);
  r.e0 = 1.0;  // already beyond tolerance: horizon 0, every point beyond it
  f = MakeForecast(*model, r);
  ASSERT_TRUE(f.ok());
  EXPECT_EQ(f->horizon.seconds, 0.0);
  for (const ForecastPoint& p : f->points) EXPECT_TRUE(p.beyond_horizon);
}

TEST(MakeForecast, NonFiniteValuesPropagateWithoutCuttingTheRunShort) {
  const auto model = DriftModel();
  ForecastRequest r = Request(3);
  r.start = {std::nan(""), 2.0};
  auto f = MakeForecast(*model, r);
  ASSERT_TRUE(f.ok());
  ASSERT_EQ(f->points.size(), 3u);
  for (const ForecastPoint& p : f->points) EXPECT_TRUE(std::isnan(p.values[0]));
}

TEST(MakeForecast, RefusesBadRequests) {
  const auto model = DriftModel();
  ForecastRequest r = Request(3);
  r.start = {1.0};
  EXPECT_EQ(MakeForecast(*model, r).status().code(), StatusCode::kInvalidArgument);
  r = Request(0);
  EXPECT_EQ(MakeForecast(*model, r).status().code(), StatusCode::kInvalidArgument);
  r = Request(3);
  r.step = Micros{};
  EXPECT_EQ(MakeForecast(*model, r).status().code(), StatusCode::kInvalidArgument);
}

}  // namespace
}  // namespace lyapcast
