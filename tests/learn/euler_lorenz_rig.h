// The Euler map of Lorenz-63 at dt = 0.01 as an exact polynomial map
// (degree 2, fitted without noise and without a penalty), and 4001 states
// of its own trajectory: a model that is exact on its data, for the tests of
// what is done with a model (history_fit_test, state_smoother_test).
#pragma once

#include <gtest/gtest.h>

#include <memory>

#include "learn/learn_test_util.h"
#include "learn/polynomial_map.h"
#include "physics/integrators.h"

namespace lyapcast::testing {

struct EulerLorenzRig {
  static constexpr double kDt = 0.01;
  Eigen::MatrixXd traj;  // 3 x 4001
  std::shared_ptr<const PolynomialMap> model;
  Eigen::VectorXd std;   // per channel over traj

  EulerLorenzRig() {
    Eigen::VectorXd x = IntegrateRk4(Lorenz63, Eigen::Vector3d(1, 1, 1), 20.0, 0.005);
    traj.resize(3, 4001);
    for (int i = 0; i <= 4000; ++i) {
      traj.col(i) = x;
      Eigen::Vector3d f;
      Lorenz63(x.data(), f.data());
      x += kDt * f;
    }
    const Eigen::VectorXd mean = traj.rowwise().mean();
    std = ((traj.colwise() - mean).array().square().rowwise().mean()).sqrt().matrix();
    PolynomialFitOptions o;
    o.degrees = {2};
    o.ridges = {0.0};
    auto fit = FitPolynomialMap(kDt, mean, std, Eigen::Vector3d(0.75, 1.2, 1.0), traj.leftCols(3000),
                                traj.middleCols(1, 3000), traj.middleCols(3000, 1000), traj.middleCols(3001, 1000), o);
    EXPECT_TRUE(fit.ok());
    model = fit->model;
  }
};

}  // namespace lyapcast::testing
