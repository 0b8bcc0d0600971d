// The training loss and Fit: finite-difference checks of every loss term
// (data over k-step compositions through gaps and missing channels, velocity
// and residual constraints, mu), determinism, cancellation, divergence.
// Data: Lorenz-63 (s = 10, r = 28, b = 8/3; REFERENCES.md) integrated with
// the project's RK4 at a fine step, sampled on the model grid.
#include <gtest/gtest.h>

#include <atomic>
#include <cmath>

#include "learn/pairs.h"
#include "learn/trainer.h"
#include "learn/trajectory_loss.h"
#include "learn_test_util.h"
#include "support/feeds.h"
#include "physics/dynamics.h"
#include "physics/integrators.h"

namespace lyapcast {
namespace {

using testing::LorenzFeed;

// n samples of Lorenz-63 every dt model units from a point on the attractor;
// every `drop`-th sample removed and every `mask_every`-th missing channel 1.
std::vector<Sample> LorenzSamples(const Dynamics& d, int n, double dt, int drop = 0, int mask_every = 0) {
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  Eigen::VectorXd x(3);
  x << 1, 1, 1;
  x = IntegrateRk4(f, x, 10.0, 1e-3);  // onto the attractor
  std::vector<Sample> out;
  for (int i = 0; i < n; ++i) {
    if (drop == 0 || i % drop != drop - 1) {
      Sample s{static_cast<DataTime>(i) * 10'000, {x[0], x[1], x[2]}, 0};
      if (mask_every > 0 && i % mask_every == mask_every - 1) {
        s.missing_mask = 0b010;
        s.values[1] = std::nan("");
      }
      out.push_back(s);
    }
    x = IntegrateRk4(f, x, dt, dt / 10);
  }
  return out;
}

struct Fixture {
  Dynamics dynamics = Dynamics::Compile(LorenzFeed()).value();
  GridSeries grid;
  TrajectorySet set;
  FlowMap<double> model;
  DynamicsTable table;

  explicit Fixture(Activation activation = Activation::kTanh) {
    grid = ResampleToGrid(LorenzSamples(dynamics, 200, 0.01, 7, 5), 3, {10'000, 0});
    set = BuildTrajectories(grid, {3, 8, 0.2});
    model = FlowMap<double>::Create(3, {8, 8}, activation, 0.01).value();
    auto norm = ComputeNormalization(grid, set.validation_begin, 0.01);
    EXPECT_TRUE(norm.ok());
    EXPECT_TRUE(model.SetNormalization(norm->mean, norm->stddev, norm->increment_scale).ok());
    model.InitRandom(7);
    for (int c = 0; c < 3; ++c) model.mu()[c] = 0.3 * (c + 1);  // nonzero so mu's gradient is exercised
    table = DynamicsTable::Build(dynamics, grid, set.validation_begin);
  }

  // Batch with mixed horizons, gap pairs and targets with a missing channel.
  std::vector<Trajectory> Batch() const {
    std::vector<Trajectory> b;
    for (std::size_t i = 0; i < set.train.size() && b.size() < 24; i += 5) b.push_back(set.train[i]);
    return b;
  }
};

void CheckGradient(Fixture& fx, const LossWeights& w) {
  const std::vector<Trajectory> batch = fx.Batch();
  bool has_gap = false;
  for (const Trajectory& t : batch) has_gap |= !fx.grid.present[static_cast<std::size_t>(t.start) + 1];
  TrajectoryLoss<double> loss;
  FlowMapGrads<double> grads = fx.model.MakeGrads();
  grads.SetZero();
  loss.Evaluate(fx.model, fx.grid, batch, w, &fx.dynamics, &fx.table, &grads);
  const auto value = [&] {
    FlowMapGrads<double> scratch = fx.model.MakeGrads();
    scratch.SetZero();
    return loss.Evaluate(fx.model, fx.grid, batch, w, &fx.dynamics, &fx.table, &scratch).Total(w);
  };
  Eigen::VectorXd& p = fx.model.parameters();
  double worst = 0;
  for (Eigen::Index i = 0; i < p.size(); ++i) {
    const double numeric = testing::CentralDifference(value, &p[i], 1e-6);
    worst = std::max(worst, testing::RelativeError(grads.flat()[i], numeric));
  }
  // Central differences (h = 1e-6) on an O(1) loss; f's Jacobian inside the
  // constraint gradients is itself a central difference (exact up to
  // rounding for Lorenz-63, whose f is quadratic).
  EXPECT_LT(worst, 1e-5);
  (void)has_gap;
}

TEST(TrajectoryLoss, DataTermGradientThroughCompositionsGapsAndMasks) {
  Fixture fx;
  ASSERT_GT(fx.set.gap_pairs, 0) << "the fixture must contain k-step pairs";
  CheckGradient(fx, {0, 0});
}

TEST(TrajectoryLoss, VelocityConstraintGradient) {
  Fixture fx(Activation::kSilu);
  CheckGradient(fx, {1.0, 0});
}

TEST(TrajectoryLoss, ResidualConstraintGradientIncludingMu) {
  Fixture fx;
  CheckGradient(fx, {0, 0.7});
}

TEST(TrajectoryLoss, AllTermsTogether) {
  Fixture fx(Activation::kSilu);
  CheckGradient(fx, {0.5, 0.5});
}

FitOptions SmallFit() {
  FitOptions o;
  o.iterations = 60;
  o.batch = 32;
  o.validate_every = 20;
  o.seed = 11;
  return o;
}

Fixture* NewFloatFixture(FlowMap<float>* model) {
  auto* fx = new Fixture;
  *model = fx->model.Cast<float>();
  return fx;
}

TEST(Fit, SameSeedGivesIdenticalWeights) {
  FlowMap<float> a, b;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&a));
  b = a;
  FitOptions o = SmallFit();
  o.dynamics = &fx->dynamics;
  o.constraints = {{ConstraintKind::kVelocity, 1.0, {0.3, 0.1}}, {ConstraintKind::kResidual, 0.5, {0.5, 0.1}}};
  auto ra = Fit(a, fx->grid, fx->set, o);
  auto rb = Fit(b, fx->grid, fx->set, o);
  ASSERT_TRUE(ra.ok() && rb.ok());
  EXPECT_EQ(a.parameters(), b.parameters());
  EXPECT_EQ(ra->validation_error, rb->validation_error);
}

TEST(Fit, ReducesTheValidationErrorAndReportsTerms) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  const double before = [&] {
    double m = 0;
    for (double e : OneStepError(model, fx->grid, fx->set.validation)) m += e / 3;
    return m;
  }();
  FitOptions o = SmallFit();
  o.iterations = 300;
  o.learning_rate = 3e-3;
  o.dynamics = &fx->dynamics;
  o.constraints = {{ConstraintKind::kVelocity, 1.0, {0.3, 0.1}}};
  int calls = 0;
  double velocity_seen = 0;
  auto r = Fit(model, fx->grid, fx->set, o, [&](const FitProgress& p) {
    ++calls;
    velocity_seen = std::max(velocity_seen, p.velocity);
  });
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_EQ(calls, 300);
  EXPECT_GT(velocity_seen, 0.0);
  EXPECT_EQ(r->validation_rmse.size(), 3u);
  EXPECT_LT(r->validation_error, 0.5 * before);
}

TEST(Fit, CancelStopsAtTheNextIteration) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  std::atomic<bool> cancel{false};
  FitOptions o = SmallFit();
  o.cancel = &cancel;
  auto r = Fit(model, fx->grid, fx->set, o, [&](const FitProgress& p) {
    if (p.iteration == 5) cancel = true;
  });
  ASSERT_TRUE(r.ok());
  EXPECT_EQ(r->iterations, 5);
  EXPECT_EQ(r->stop, FitStop::kCancelled);
}

TEST(Fit, DivergenceIsAnErrorNamingTheIteration) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  FitOptions o = SmallFit();
  o.learning_rate = 1e30;
  o.clip = 1e30;
  auto r = Fit(model, fx->grid, fx->set, o);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("diverged at iteration"), std::string::npos) << r.status().message();
  EXPECT_TRUE(model.parameters().allFinite());
}

TEST(Fit, StopsOnTheWallTimeBudget) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  FitOptions o = SmallFit();
  o.iterations = 1'000'000;
  o.time_budget_s = 0.05;  // far less than a million iterations take
  auto r = Fit(model, fx->grid, fx->set, o);
  ASSERT_TRUE(r.ok());
  EXPECT_EQ(r->stop, FitStop::kTimeBudget);
  EXPECT_LT(r->iterations, 1'000'000);
  EXPECT_EQ(r->validation_rmse.size(), 3u);
}

TEST(Fit, EarlyStoppingKeepsTheBestWeights) {
  // With a zero learning rate the validation error never improves after the
  // first check, so patience 2 stops at the third check.
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  const Eigen::VectorXf start = model.parameters();
  FitOptions o = SmallFit();
  o.learning_rate = 0;
  o.validate_every = 1;
  o.patience = 2;
  auto r = Fit(model, fx->grid, fx->set, o);
  ASSERT_TRUE(r.ok());
  EXPECT_EQ(r->stop, FitStop::kEarlyStopping);
  EXPECT_EQ(r->iterations, 3);
  EXPECT_EQ(r->best_iteration, 1);
  EXPECT_EQ(model.parameters(), start);
}

TEST(Fit, RefusesEmptyTrainingData) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  TrajectorySet empty;
  EXPECT_FALSE(Fit(model, fx->grid, empty, SmallFit()).ok());
}

}  // namespace
}  // namespace lyapcast
