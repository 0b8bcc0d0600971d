// The Lyapunov spectrum of a flow map learned from Lorenz-63 samples: the
// largest exponent within 10 % of the true 0.9056 and the second, the flow's
// zero exponent, near zero (docs/references.md "Lyapunov exponents": for a learned map check these two,
// not the strongly negative ones; the 10 % tolerance is common practice when
// the one-step error is small, no published source).
#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <gtest/gtest.h>

#include "chaos/lyapunov.h"
#include "chaos_test_util.h"
#include "learn/pairs.h"
#include "learn/trainer.h"

namespace lyapcast {
namespace {

TEST(LearnedLorenz, LargestExponentAndTheZeroExponent) {
  const Eigen::MatrixXd x = testing::LorenzSamples(60.0, 0.01);  // 6000 samples, dt = 0.01
  std::vector<Sample> samples;
  for (Eigen::Index i = 0; i < x.cols(); ++i) samples.push_back(Sample{DataTimeFromMicros(i * 10'000LL), {x(0, i), x(1, i), x(2, i)}, 0});
  const GridSeries grid = ResampleToGrid(samples, 3, {Micros(10'000), Micros{}});
  const TrajectorySet set = BuildTrajectories(grid, {4, 8, 0.2});
  auto norm = ComputeNormalization(grid, set.validation_begin, 0.01);
  ASSERT_TRUE(norm.ok());
  FlowMap<float> model = FlowMap<float>::Create(3, {64, 64}, Activation::kTanh, 0.01).value();
  ASSERT_TRUE(model.SetNormalization(norm->mean.cast<float>(), norm->stddev.cast<float>(),
                                     norm->increment_scale.cast<float>())
                  .ok());
  model.InitRandom(2024);
  FitOptions o;
  o.iterations = 8000;
  o.learning_rate = 2e-3;
  o.lr_floor_fraction = 0.01;
  o.validate_every = 1000;
  o.seed = 5;
  auto fit = Fit(model, grid, set, o);
  ASSERT_TRUE(fit.ok()) << fit.status().ToString();
  std::printf("  one-step validation error %.3e\n", fit->validation_error);

  SpectrumOptions s;
  s.exponents = 2;
  s.transient_steps = 10'000;
  s.steps = 100'000;  // 1000 time units
  const NeuralFlowMap<float> wrapped(model);
  auto e = LyapunovSpectrum(ModelMapStep(wrapped), x.col(x.cols() - 1), s);
  ASSERT_TRUE(e.ok()) << e.status().ToString();
  std::printf("  learned map: %.4f, %.4f (true 0.9056, 0)\n", e->exponents[0], e->exponents[1]);
  EXPECT_NEAR(e->exponents[0] / 0.9056, 1.0, 0.10);
  EXPECT_NEAR(e->exponents[1], 0.0, 0.05);
}

}  // namespace
}  // namespace lyapcast
