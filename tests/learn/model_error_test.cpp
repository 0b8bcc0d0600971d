// ModelValidSteps and ModelOneStepError (learn/model_error.h) on a grid of
// Lorenz-63 samples: an exact model stays valid to the end of the data, a
// slightly wrong one fails sooner and a wrong one at once; gaps are counted
// through, and the one-step error of the exact model is round-off.
#include "learn/model_error.h"

#include <gtest/gtest.h>

#include <random>

#include "learn/learn_test_util.h"
#include "learn/polynomial_map.h"
#include "physics/integrators.h"

namespace lyapcast {
namespace {

constexpr double kDt = 0.01;

// The Euler map of Lorenz-63 as a degree-2 polynomial map whose readout is
// scaled by (1 + error): error 0 is exact on its own trajectory.
std::shared_ptr<const PolynomialMap> EulerMap(const Eigen::MatrixXd& traj, double error) {
  const Eigen::VectorXd mean = traj.rowwise().mean();
  const Eigen::VectorXd std = ((traj.colwise() - mean).array().square().rowwise().mean()).sqrt().matrix();
  PolynomialFitOptions o;
  o.degrees = {2};
  o.ridges = {0.0};
  const Eigen::Index n = traj.cols() - 1;
  auto fit = FitPolynomialMap(kDt, mean, std, Eigen::Vector3d(0.75, 1.2, 1.0), traj.leftCols(n),
                              traj.rightCols(n), traj.leftCols(n), traj.rightCols(n), o);
  EXPECT_TRUE(fit.ok());
  const PolynomialMap& m = *fit->model;
  return PolynomialMap::Create(m.features(), kDt, m.mean(), m.stddev(), m.increment_scale(),
                               m.readout() * (1.0 + error))
      .value();
}

struct Rig {
  Eigen::MatrixXd traj;
  GridSeries grid;
  Rig() {
    Eigen::VectorXd x = IntegrateRk4(testing::Lorenz63, Eigen::Vector3d(1, 1, 1), 20.0, 0.005);
    traj.resize(3, 3001);
    std::vector<Sample> samples;
    for (int i = 0; i <= 3000; ++i) {
      traj.col(i) = x;
      Sample s;
      s.t = DataTimeFromMicros(i * 10'000LL);
      s.values = {x[0], x[1], x[2]};
      if (i % 97 == 50) {  // a missing reading now and then: counted through
        s.values[1] = std::nan("");
        s.missing_mask = 2;
      }
      samples.push_back(s);
      Eigen::Vector3d f;
      testing::Lorenz63(x.data(), f.data());
      x += kDt * f;
    }
    grid = ResampleToGrid(samples, 3, GridOptions(Micros(10'000)));
  }
};

TEST(ModelValidSteps, AnExactModelStaysValidAndAWrongOneFailsSooner) {
  const Rig rig;
  ASSERT_EQ(rig.grid.size(), 3001u);
  const Eigen::VectorXd scale = EulerMap(rig.traj, 0)->stddev();
  const ValidSteps exact = ModelValidSteps(*EulerMap(rig.traj, 0), rig.grid, 2000, 3001, scale, 10, 400);
  EXPECT_EQ(exact.starts, 10);
  EXPECT_EQ(exact.capped, 10);
  // Starts 2000, 2100, ..., 2900: valid up to max_steps or the end of the
  // data (3000), whichever comes first.
  EXPECT_DOUBLE_EQ(exact.mean, (7 * 400 + 300 + 200 + 100) / 10.0);
  const ValidSteps slight = ModelValidSteps(*EulerMap(rig.traj, 1e-4), rig.grid, 2000, 3001, scale, 10, 400);
  const ValidSteps wrong = ModelValidSteps(*EulerMap(rig.traj, 0.2), rig.grid, 2000, 3001, scale, 10, 400);
  EXPECT_LT(slight.mean, 400);
  EXPECT_GT(slight.mean, wrong.mean);
  EXPECT_LT(wrong.mean, 100);
  EXPECT_EQ(wrong.capped, 0);
  // A span with no room after its starts scores nothing.
  EXPECT_EQ(ModelValidSteps(*EulerMap(rig.traj, 0), rig.grid, 3000, 3001, scale).starts, 0);
}

TEST(ModelOneStepError, AnExactModelHasRoundOffError) {
  const Rig rig;
  std::vector<Trajectory> t;
  for (int s = 2000; s < 2900; s += 7) t.push_back({s, 1});
  const std::vector<double> e = ModelOneStepError(*EulerMap(rig.traj, 0), rig.grid, t);
  ASSERT_EQ(e.size(), 3u);
  for (double v : e) EXPECT_LT(v, 1e-10);
  const std::vector<double> off = ModelOneStepError(*EulerMap(rig.traj, 0.2), rig.grid, t);
  for (double v : off) EXPECT_GT(v, 1e-4);
}

}  // namespace
}  // namespace lyapcast

namespace lyapcast {
namespace {

TEST(ModelValidSteps, StartsFittedToHistoryOutlastNoisyStarts) {
  // 1 % of each channel's std as sensor noise on every sample; the exact
  // model from the noisy sample against the same model from a start fitted
  // to 20 steps of history (learn/history_fit.h): the fitted starts must
  // stay valid clearly longer on average.
  const Rig rig;
  const Eigen::VectorXd scale = EulerMap(rig.traj, 0)->stddev();
  std::mt19937_64 rng(5);
  std::normal_distribution<double> noise(0.0, 0.01);
  std::vector<Sample> samples;
  for (Eigen::Index i = 0; i < rig.traj.cols(); ++i) {
    Sample s;
    s.t = DataTimeFromMicros(i * 10'000LL);
    for (int c = 0; c < 3; ++c) s.values.push_back(rig.traj(c, i) + noise(rng) * scale[c]);
    samples.push_back(s);
  }
  const GridSeries noisy = ResampleToGrid(samples, 3, GridOptions(Micros(10'000)));
  const auto model = EulerMap(rig.traj, 0);
  const ValidSteps raw = ModelValidSteps(*model, noisy, 1000, 3001, scale, 40, 2000);
  const ValidSteps fitted = ModelValidSteps(*model, noisy, 1000, 3001, scale, 40, 2000, 0.5, 20);
  EXPECT_EQ(raw.starts, fitted.starts);
  // Measured 433 vs 311 steps.
  EXPECT_GT(fitted.mean, 1.2 * raw.mean) << "fitted " << fitted.mean << " raw " << raw.mean;
}

}  // namespace
}  // namespace lyapcast
