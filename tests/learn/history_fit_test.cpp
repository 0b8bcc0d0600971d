// FitStateToHistory (learn/history_fit.h): with an exact model the fitted
// start equals the true state; with 1 % sensor noise it is much closer to
// the truth than the newest sample; missing channels and bad input.
#include "learn/history_fit.h"

#include <gtest/gtest.h>

#include <cmath>
#include <random>

#include "learn/euler_lorenz_rig.h"

namespace lyapcast {
namespace {

using Rig = testing::EulerLorenzRig;

TEST(FitStateToHistory, AnExactModelOnCleanDataGivesTheTrueState) {
  const Rig rig;
  const Eigen::MatrixXd obs = rig.traj.middleCols(3500, 31);
  auto fit = FitStateToHistory(*rig.model, obs, rig.std);
  ASSERT_TRUE(fit.ok()) << fit.status().message();
  EXPECT_LT((fit->start - rig.traj.col(3530)).norm(), 1e-7 * rig.traj.col(3530).norm());
  EXPECT_LT(fit->rms_after, 1e-9);
  EXPECT_EQ(fit->observations, 93);
}

TEST(FitStateToHistory, NoisyHistoryGivesAStartCloserToTheTruthThanTheNewestSample) {
  // 1 % of each channel's std as sensor noise, 40 windows of 31 samples
  // (0.3 s, about a quarter of Lorenz-63's Lyapunov time): the fitted start
  // must beat the newest sample by a wide margin on average.
  const Rig rig;
  std::mt19937_64 rng(7);
  std::normal_distribution<double> noise(0.0, 1.0);
  double raw = 0, fitted = 0;
  for (int w = 0; w < 40; ++w) {
    const int begin = 100 * w;
    Eigen::MatrixXd obs = rig.traj.middleCols(begin, 31);
    for (Eigen::Index k = 0; k < obs.cols(); ++k) {
      for (int c = 0; c < 3; ++c) obs(c, k) += 0.01 * rig.std[c] * noise(rng);
    }
    auto fit = FitStateToHistory(*rig.model, obs, rig.std);
    ASSERT_TRUE(fit.ok()) << fit.status().message();
    const Eigen::VectorXd truth = rig.traj.col(begin + 30);
    raw += (obs.col(30) - truth).cwiseQuotient(rig.std).squaredNorm();
    fitted += (fit->start - truth).cwiseQuotient(rig.std).squaredNorm();
    EXPECT_NEAR(fit->rms_after, 0.01, 0.005) << "the residual is the noise";
  }
  EXPECT_LT(fitted, 0.25 * raw) << "fitted " << std::sqrt(fitted / 120) << " vs raw " << std::sqrt(raw / 120);
}

TEST(FitStateToHistory, MissingValuesAreSkippedAndBadInputRefused) {
  const Rig rig;
  Eigen::MatrixXd obs = rig.traj.middleCols(2000, 21);
  obs(0, 0) = NAN;   // the first guess takes x from the next observation
  obs(1, 20) = NAN;  // the newest y is missing: estimated from the rest
  auto fit = FitStateToHistory(*rig.model, obs, rig.std);
  ASSERT_TRUE(fit.ok()) << fit.status().message();
  EXPECT_LT((fit->start - rig.traj.col(2020)).norm(), 1e-6 * rig.traj.col(2020).norm());
  EXPECT_EQ(fit->observations, 61);
  Eigen::MatrixXd none = obs;
  none.row(2).setConstant(NAN);
  EXPECT_FALSE(FitStateToHistory(*rig.model, none, rig.std).ok());
  EXPECT_FALSE(FitStateToHistory(*rig.model, obs.leftCols(1), rig.std).ok());
  EXPECT_FALSE(FitStateToHistory(*rig.model, obs.topRows(2), rig.std).ok());
  EXPECT_FALSE(FitStateToHistory(*rig.model, obs, Eigen::Vector3d(1, 0, 1)).ok());
}

}  // namespace
}  // namespace lyapcast
