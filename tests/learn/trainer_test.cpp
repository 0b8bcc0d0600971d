// The training loss and Fit: finite-difference checks of every loss term
// (data over k-step compositions through gaps and missing channels, velocity
// and residual constraints, mu, the velocity term at a target 3 steps on),
// the gap-aware normalization and validation error, determinism,
// cancellation, divergence.
// Data: Lorenz-63 (s = 10, r = 28, b = 8/3; docs/references.md "Systems") integrated with
// the project's RK4 at a fine step, sampled on the model grid.
#include <gtest/gtest.h>

#include <atomic>
#include <cmath>
#include <memory>
#include <set>

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
// every `drop`-th sample removed and every `mask_every`-th missing channel 1;
// with stride > 1 only the samples i = 0, stride, 2 stride, ... are kept.
std::vector<Sample> LorenzSamples(const Dynamics& d, int n, double dt, int drop = 0, int mask_every = 0,
                                  int stride = 1) {
  const Rhs f = [&d](const double* x, double* dx) { d.Eval(x, dx); };
  Eigen::VectorXd x(3);
  x << 1, 1, 1;
  x = IntegrateRk4(f, x, 10.0, 1e-3);  // onto the attractor
  std::vector<Sample> out;
  for (int i = 0; i < n; ++i) {
    if ((drop == 0 || i % drop != drop - 1) && i % stride == 0) {
      Sample s{DataTimeFromMicros(static_cast<std::int64_t>(i) * 10'000), {x[0], x[1], x[2]}, 0};
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
  Dynamics dynamics = testing::MustCompile(LorenzFeed());
  GridSeries grid;
  TrajectorySet set;
  FlowMap<double> model;
  DynamicsTable table;

  // Default: every 7th sample dropped (2-step pairs), every 5th missing a
  // channel. With stride > 1: only every stride-th of 3 * 200 samples
  // delivered (every trajectory's first target `stride` steps on), every
  // 10th missing a channel (some first targets incomplete).
  explicit Fixture(Activation activation = Activation::kTanh, int stride = 1) {
    grid = ResampleToGrid(stride > 1 ? LorenzSamples(dynamics, 3 * 200, 0.01, 0, 10, stride)
                                     : LorenzSamples(dynamics, 200, 0.01, 7, 5),
                          3, {Micros(10'000), Micros{}});
    set = BuildTrajectories(grid, {3, 8, 0.2});
    model = FlowMap<double>::Create(3, {8, 8}, activation, 0.01).value();
    auto norm = ComputeNormalization(grid, set.validation_begin, 0.01, 8);
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
}

// The velocity term by its definition (learn/trainer.h), unrolled by hand in
// double: at each trajectory's first present target y, k steps on,
// ((f(G^k(z)) - f(y)) / fs)^2 averaged over channels and over the
// trajectories whose first target is complete. Sets *ks to the k met.
double VelocityByHand(const Fixture& fx, const std::vector<Trajectory>& batch, std::set<int>* ks) {
  double sum = 0, n = 0;
  FlowMapCache<double> cache;
  Eigen::MatrixXd x, next;
  Eigen::VectorXd fg(3);
  for (const Trajectory& t : batch) {
    int k = 1;
    while (k <= t.horizon && !fx.grid.present[static_cast<std::size_t>(t.start + k)]) ++k;
    if (k > t.horizon || !fx.grid.complete(static_cast<std::size_t>(t.start + k))) continue;
    ks->insert(k);
    x = Eigen::Map<const Eigen::VectorXd>(fx.grid.row(static_cast<std::size_t>(t.start)), 3);
    for (int step = 0; step < k; ++step) {
      fx.model.Forward(x, &next, &cache);
      x = next;
    }
    fx.dynamics.Eval(x.data(), fg.data());
    sum += ((fg - fx.table.f.col(t.start + k)).cwiseQuotient(fx.table.fscale)).squaredNorm() / 3;
    n += 1;
  }
  return sum / n;
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

TEST(TrajectoryLoss, VelocityConstraintAtATargetThreeStepsOnGradient) {
  // Every 3rd sample delivered: no trajectory has a target one step on, each
  // has its first target 3 steps on, and the velocity term must act there,
  // backpropagating through G^3.
  Fixture fx(Activation::kSilu, 3);
  const std::vector<Trajectory> batch = fx.Batch();
  ASSERT_GE(batch.size(), 20u);
  for (const Trajectory& t : batch) {
    ASSERT_FALSE(fx.grid.present[static_cast<std::size_t>(t.start) + 1]);
    ASSERT_EQ(t.horizon, 3);
  }
  TrajectoryLoss<double> loss;
  FlowMapGrads<double> grads = fx.model.MakeGrads();
  grads.SetZero();
  const LossTerms on = loss.Evaluate(fx.model, fx.grid, batch, {1.0, 0}, &fx.dynamics, &fx.table, &grads);
  std::set<int> ks;
  const double by_hand = VelocityByHand(fx, batch, &ks);
  EXPECT_EQ(ks, std::set<int>{3});
  EXPECT_GT(on.velocity, 1e-3) << "the velocity term must act on gapped data";
  EXPECT_NEAR(on.velocity, by_hand, 1e-12 * by_hand);
  // The term changes the gradient (the data term alone gives another one).
  FlowMapGrads<double> data_only = fx.model.MakeGrads();
  data_only.SetZero();
  loss.Evaluate(fx.model, fx.grid, batch, {0, 0}, &fx.dynamics, &fx.table, &data_only);
  EXPECT_GT((grads.flat() - data_only.flat()).norm(), 1e-3 * grads.flat().norm());
  CheckGradient(fx, {1.0, 0});
}

TEST(TrajectoryLoss, VelocityTermIsAtTheFirstTargetOneOrTwoStepsOn) {
  // The default fixture: first targets one step on, or two across a dropped
  // sample; the value is the hand-unrolled definition either way.
  Fixture fx;
  const std::vector<Trajectory> batch = fx.Batch();
  TrajectoryLoss<double> loss;
  FlowMapGrads<double> grads = fx.model.MakeGrads();
  grads.SetZero();
  const LossTerms terms = loss.Evaluate(fx.model, fx.grid, batch, {0.8, 0}, &fx.dynamics, &fx.table, &grads);
  std::set<int> ks;
  const double by_hand = VelocityByHand(fx, batch, &ks);
  EXPECT_EQ(ks, (std::set<int>{1, 2}));
  EXPECT_NEAR(terms.velocity, by_hand, 1e-12 * by_hand);
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

TEST(Fit, VelocityConstraintActsWhenSamplesAreThreeStepsApart) {
  std::unique_ptr<Fixture> fx(new Fixture(Activation::kTanh, 3));
  const FlowMap<float> start = fx->model.Cast<float>();
  FlowMap<float> plain = start, constrained = start;
  FitOptions o = SmallFit();
  ASSERT_TRUE(Fit(plain, fx->grid, fx->set, o).ok());
  o.dynamics = &fx->dynamics;
  o.constraints = {{ConstraintKind::kVelocity, 1.0, {0.3, 0.1}}};
  double velocity_seen = 0;
  auto r = Fit(constrained, fx->grid, fx->set, o, [&](const FitProgress& p) {
    velocity_seen = std::max(velocity_seen, p.velocity);
  });
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_GT(velocity_seen, 0.0);
  EXPECT_NE(plain.parameters(), constrained.parameters());
  EXPECT_TRUE(std::isfinite(r->validation_error)) << "gapped validation data must be scored";
}

// ---- ComputeNormalization

struct NormalizationData {
  Dynamics dynamics = testing::MustCompile(LorenzFeed());
  GridSeries full, sparse;  // every sample; every 5th
  NormalizationData() {
    full = ResampleToGrid(LorenzSamples(dynamics, 3000, 0.01), 3, {Micros(10'000), Micros{}});
    sparse = ResampleToGrid(LorenzSamples(dynamics, 3000, 0.01, 0, 0, 5), 3, {Micros(10'000), Micros{}});
  }
};

TEST(ComputeNormalization, ConsecutiveStatesGiveBitIdenticalResultsForAnyMaxGap) {
  NormalizationData d;
  auto one = ComputeNormalization(d.full, 2400, 0.01);
  auto eight = ComputeNormalization(d.full, 2400, 0.01, 8);
  ASSERT_TRUE(one.ok() && eight.ok());
  EXPECT_EQ(one->mean, eight->mean);
  EXPECT_EQ(one->stddev, eight->stddev);
  EXPECT_EQ(one->increment_scale, eight->increment_scale);
}

TEST(ComputeNormalization, AConstantChannelIsLeftOutAndHeldAtItsValue) {
  Dynamics dynamics = testing::MustCompile(LorenzFeed());
  // Lorenz with z replaced by a channel stuck at 3.5 (a closed valve).
  std::vector<Sample> samples = LorenzSamples(dynamics, 3000, 0.01);
  for (Sample& s : samples) s.values[2] = 3.5;
  const GridSeries grid = ResampleToGrid(samples, 3, {Micros(10'000), Micros{}});
  auto n = ComputeNormalization(grid, 2400, 0.01);
  ASSERT_TRUE(n.ok()) << n.status().ToString();
  EXPECT_EQ(n->left_out, 0b100u);
  EXPECT_EQ(n->mean[2], 3.5);
  EXPECT_EQ(n->stddev[2], Normalization::kLeftOutScale * 3.5);
  EXPECT_EQ(n->increment_scale[2], Normalization::kLeftOutIncrement);
  EXPECT_GT(n->stddev[0], 1.0) << "x and y are normalized as usual";
  // A model with it holds the channel at its value, whatever its weights.
  auto created = FlowMap<float>::Create(3, {8}, Activation::kTanh, 0.01);
  ASSERT_TRUE(created.ok());
  FlowMap<float> model = std::move(created).value();
  ASSERT_TRUE(model.SetNormalization(n->mean.cast<float>(), n->stddev.cast<float>(),
                                     n->increment_scale.cast<float>())
                  .ok());
  model.InitRandom(7);
  Eigen::MatrixXf x(3, 1), y;
  x << 1.0f, 2.0f, 3.5f;
  FlowMapCache<float> cache;
  model.Forward(x, &y, &cache);
  EXPECT_EQ(y(2, 0), 3.5f);
}

TEST(ComputeNormalization, BridgesGapsUpToMaxGapWithTheIncrementPerStep) {
  NormalizationData d;
  // Samples 5 steps apart: no consecutive states at all.
  auto consecutive_only = ComputeNormalization(d.sparse, 2400, 0.01);
  ASSERT_FALSE(consecutive_only.ok());
  EXPECT_NE(consecutive_only.status().message().find("at most 1 model step later"), std::string::npos)
      << consecutive_only.status().message();
  auto too_short = ComputeNormalization(d.sparse, 2400, 0.01, 4);
  ASSERT_FALSE(too_short.ok());
  EXPECT_NE(too_short.status().message().find("at most 4 model steps later"), std::string::npos)
      << too_short.status().message();

  auto gapped = ComputeNormalization(d.sparse, 2400, 0.01, 8);
  auto full = ComputeNormalization(d.full, 2400, 0.01);
  ASSERT_TRUE(gapped.ok() && full.ok()) << gapped.status().ToString();
  for (int c = 0; c < 3; ++c) {
    // 480 of the 2400 states: the moments agree to sampling accuracy.
    EXPECT_NEAR(gapped->mean[c], full->mean[c], 0.02 * full->stddev[c]) << "channel " << c;
    EXPECT_NEAR(gapped->stddev[c] / full->stddev[c], 1.0, 0.02) << "channel " << c;
    // The 5-step chord per step: the one-step scale up to curvature over
    // 0.05 time units (measured within 3 %, slightly low as the mean of 5
    // increments).
    EXPECT_NEAR(gapped->increment_scale[c] / full->increment_scale[c], 1.0, 0.05) << "channel " << c;
  }
}

TEST(ComputeNormalization, IncrementPerStepIsTheChordOverK) {
  // Hand-made grid: a linear ramp sampled at 0, 2, 3, 6, 7 (gaps of 2 and 3):
  // every increment per step is the slope, whatever k.
  GridSeries g;
  g.channels = 1;
  g.step = Micros(10'000);
  const std::vector<int> at = {0, 2, 3, 6, 7};
  g.values.assign(8, std::nan(""));
  g.mask.assign(8, ~std::uint64_t{0});
  g.present.assign(8, 0);
  for (int i : at) {
    g.values[static_cast<std::size_t>(i)] = 1.0 + 0.5 * i + (i == 3 ? 0.25 : 0.0);
    g.mask[static_cast<std::size_t>(i)] = 0;
    g.present[static_cast<std::size_t>(i)] = 1;
  }
  auto n = ComputeNormalization(g, 8, 0.1, 3);
  ASSERT_TRUE(n.ok()) << n.status().ToString();
  // Per-step increments: (0 -> 2) 0.5, (2 -> 3) 0.75, (3 -> 6) (1.5 - 0.25) / 3, (6 -> 7) 0.5.
  const std::vector<double> inc = {0.5, 0.75, (1.5 - 0.25) / 3, 0.5};
  double m = 0, v = 0;
  for (double x : inc) m += x / 4;
  for (double x : inc) v += (x - m) * (x - m) / 3;
  EXPECT_NEAR(n->increment_scale[0], std::sqrt(v) / 0.1, 1e-12);
}

// ---- the validation error (OneStepError)

// RMSE per channel by the definition in learn/trainer.h, one trajectory at a
// time: G^k from the start to the first present target, k steps on.
std::vector<double> FirstTargetErrorByHand(const FlowMap<float>& model, const GridSeries& grid,
                                           const std::vector<Trajectory>& trajectories, std::set<int>* ks) {
  std::vector<double> sum(3, 0.0), count(3, 0.0);
  FlowMapCache<float> cache;
  MlpTypes<float>::Mat x, next;
  for (const Trajectory& t : trajectories) {
    int k = 1;
    while (k <= t.horizon && !grid.present[static_cast<std::size_t>(t.start + k)]) ++k;
    if (k > t.horizon) continue;
    ks->insert(k);
    x = Eigen::Map<const Eigen::VectorXd>(grid.row(static_cast<std::size_t>(t.start)), 3).cast<float>();
    for (int step = 0; step < k; ++step) {
      model.Forward(x, &next, &cache);
      x = next;
    }
    const auto j = static_cast<std::size_t>(t.start + k);
    for (int c = 0; c < 3; ++c) {
      if ((grid.mask[j] >> c) & 1U) continue;
      const double e = (x(c, 0) - grid.row(j)[c]) / model.stddev()[c];
      sum[static_cast<std::size_t>(c)] += e * e;
      count[static_cast<std::size_t>(c)] += 1;
    }
  }
  std::vector<double> out(3);
  for (std::size_t c = 0; c < 3; ++c) out[c] = std::sqrt(sum[c] / count[c]);
  return out;
}

void ExpectFirstTargetError(const Fixture& fx, const std::set<int>& want_ks) {
  const FlowMap<float> model = fx.model.Cast<float>();
  for (const auto* list : {&fx.set.validation, &fx.set.train}) {
    std::set<int> ks;
    const std::vector<double> want = FirstTargetErrorByHand(model, fx.grid, *list, &ks);
    const std::vector<double> got = OneStepError(model, fx.grid, *list);
    EXPECT_EQ(ks, want_ks);
    for (std::size_t c = 0; c < 3; ++c) {
      // Batched and one-column float products may round differently.
      EXPECT_NEAR(got[c], want[c], 1e-4 * want[c]) << "channel " << c;
    }
  }
}

TEST(OneStepError, ScoresTheFirstTargetKStepsOnThroughTheComposition) {
  ExpectFirstTargetError(Fixture(Activation::kTanh, 3), {3});
}

TEST(OneStepError, IsTheOneStepErrorWhereTheNextPointHoldsASample) {
  ExpectFirstTargetError(Fixture(), {1, 2});
}

TEST(OneStepError, SkipsTrajectoriesWithoutATargetAndReportsNaNForUnseenChannels) {
  Fixture fx(Activation::kTanh, 3);
  const FlowMap<float> model = fx.model.Cast<float>();
  // A horizon short of the first target: nothing to score.
  std::vector<Trajectory> short_of_it = fx.set.validation;
  for (Trajectory& t : short_of_it) t.horizon = 2;
  for (double e : OneStepError(model, fx.grid, short_of_it)) EXPECT_TRUE(std::isnan(e));
}

TEST(Fit, RefusesEmptyTrainingData) {
  FlowMap<float> model;
  std::unique_ptr<Fixture> fx(NewFloatFixture(&model));
  TrajectorySet empty;
  EXPECT_FALSE(Fit(model, fx->grid, empty, SmallFit()).ok());
}

}  // namespace
}  // namespace lyapcast
