// SmoothStates (learn/state_smoother.h): measurements on the model's own
// trajectory stay where they are; 1 % sensor noise with 10 % of the samples
// missing comes out several times smaller, gaps filled; bad input is named.
// The solver's algebra is checked against numpy in state_smoother_reftest.cpp.
#include "learn/state_smoother.h"

#include <gtest/gtest.h>

#include <cmath>
#include <random>

#include "learn/euler_lorenz_rig.h"

namespace lyapcast {
namespace {

using Rig = testing::EulerLorenzRig;

double NormalizedRms(const Eigen::MatrixXd& a, const Eigen::MatrixXd& b, const Eigen::VectorXd& std) {
  return std::sqrt((std.cwiseInverse().asDiagonal() * (a - b)).squaredNorm() / static_cast<double>(a.size()));
}

TEST(SmoothStates, MeasurementsOnTheModelsTrajectoryStayPut) {
  const Rig rig;
  const Eigen::MatrixXd obs = rig.traj.middleCols(1000, 500);
  auto s = SmoothStates(*rig.model, obs, rig.std);
  ASSERT_TRUE(s.ok()) << s.status().message();
  EXPECT_LT(NormalizedRms(s->states, obs, rig.std), 1e-9);
  EXPECT_LT(s->rms_correction, 1e-9);
  EXPECT_LT(s->rms_model_misfit, 1e-9);
  EXPECT_EQ(s->measurements, 1500);
}

TEST(SmoothStates, NoisyMeasurementsWithGapsComeOutCloserToTheTruth) {
  // 1 % of each channel's std as sensor noise and 10 % of the columns
  // missing, 3000 steps (30 Lyapunov times of Lorenz-63): the smoothed
  // states must be at least 3x closer to the truth than the measurements,
  // and the missing columns (placed by the dynamics alone) within the noise.
  const Rig rig;
  const Eigen::MatrixXd truth = rig.traj.middleCols(500, 3000);
  std::mt19937_64 rng(7);
  std::normal_distribution<double> noise(0.0, 0.01);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  Eigen::MatrixXd obs = truth;
  std::vector<Eigen::Index> missing;
  for (Eigen::Index t = 0; t < obs.cols(); ++t) {
    for (Eigen::Index c = 0; c < 3; ++c) obs(c, t) += noise(rng) * rig.std[c];
    if (t > 0 && t + 1 < obs.cols() && u(rng) < 0.1) {
      obs.col(t).setConstant(std::nan(""));
      missing.push_back(t);
    }
  }
  auto s = SmoothStates(*rig.model, obs, rig.std);
  ASSERT_TRUE(s.ok()) << s.status().message();
  ASSERT_TRUE(s->states.allFinite());
  double measured = 0, smoothed = 0;
  int n = 0;
  for (Eigen::Index t = 0; t < obs.cols(); ++t) {
    if (std::isnan(obs(0, t))) continue;
    measured += (rig.std.cwiseInverse().asDiagonal() * (obs.col(t) - truth.col(t))).squaredNorm();
    smoothed += (rig.std.cwiseInverse().asDiagonal() * (s->states.col(t) - truth.col(t))).squaredNorm();
    n += 3;
  }
  measured = std::sqrt(measured / n);
  smoothed = std::sqrt(smoothed / n);
  EXPECT_NEAR(measured, 0.01, 0.001);
  EXPECT_LT(smoothed, measured / 3) << "smoothed " << smoothed << " measured " << measured;
  double gaps = 0;
  for (Eigen::Index t : missing) {
    gaps += (rig.std.cwiseInverse().asDiagonal() * (s->states.col(t) - truth.col(t))).squaredNorm();
  }
  EXPECT_LT(std::sqrt(gaps / (3.0 * static_cast<double>(missing.size()))), 0.01);
  // The corrections are about the noise; the model misfits far below it.
  EXPECT_GT(s->rms_correction, 0.005);
  EXPECT_LT(s->rms_correction, 0.015);
  EXPECT_LT(s->rms_model_misfit, s->rms_correction / 3);
  EXPECT_GE(s->iterations, 1);
}

TEST(SmoothStates, ABadRequestIsNamed) {
  const Rig rig;
  const Eigen::MatrixXd obs = rig.traj.middleCols(0, 20);
  auto wrong_rows = SmoothStates(*rig.model, obs.topRows(2), rig.std);
  ASSERT_FALSE(wrong_rows.ok());
  EXPECT_NE(wrong_rows.status().message().find("2 channels"), std::string::npos) << wrong_rows.status().message();
  EXPECT_FALSE(SmoothStates(*rig.model, obs.leftCols(1), rig.std).ok());
  EXPECT_FALSE(SmoothStates(*rig.model, obs, Eigen::Vector3d(1, 0, 1)).ok());
  StateSmootherOptions o;
  o.dynamics_weight = 0;
  EXPECT_FALSE(SmoothStates(*rig.model, obs, rig.std, o).ok());
  Eigen::MatrixXd no_y = obs;
  no_y.row(1).setConstant(std::nan(""));
  auto missing = SmoothStates(*rig.model, no_y, rig.std);
  ASSERT_FALSE(missing.ok());
  EXPECT_NE(missing.status().message().find("channel 1 is missing from every column"), std::string::npos)
      << missing.status().message();
}

}  // namespace
}  // namespace lyapcast
