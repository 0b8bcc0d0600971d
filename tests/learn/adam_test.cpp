// AdamW (Loshchilov & Hutter, ICLR 2019; Adam: Kingma & Ba, ICLR 2015, as
// implemented by torch.optim.AdamW), clip_grad_norm_ semantics and the
// learning-rate schedule. The optimizer is also checked against PyTorch
// itself in torch_reftest.cpp.
#include "learn/adam.h"

#include <gtest/gtest.h>

#include <cmath>
#include <numbers>

namespace lyapcast {
namespace {

// Two steps worked by hand, lr = 0.1, wd = 0.01, b1 = 0.9, b2 = 0.999,
// eps = 1e-8, p0 = (1, -2):
// step 1, g = (0.5, -1):
//   decay   p = 0.999 p0 = (0.999, -1.998)
//   m = 0.1 g = (0.05, -0.1);  v = 0.001 g^2 = (0.00025, 0.001)
//   mhat = m / 0.1 = (0.5, -1);  vhat = v / 0.001 = (0.25, 1)
//   p -= 0.1 mhat / (sqrt(vhat) + 1e-8) = 0.1 (0.5 / 0.50000001, -1 / 1.00000001)
//   p1 = (0.899000001999999960, -1.898000000999999990)
// step 2, g = (0.1, 0.3):
//   decay   p = 0.999 p1
//   m = 0.9 m + 0.1 g = (0.055, -0.06);  v = 0.999 v + 0.001 g^2 = (0.00025975, 0.001089)
//   mhat = m / (1 - 0.81) = m / 0.19;  vhat = v / (1 - 0.998001) = v / 0.001999
//   p2 = 0.999 p1 - 0.1 mhat / (sqrt(vhat) + 1e-8)
//      = (0.817796906382651210, -1.853317142428226070)
// (evaluated with 40-digit decimal arithmetic).
TEST(AdamW, MatchesTwoHandComputedSteps) {
  AdamW<double> adam(2, AdamWOptions{0.9, 0.999, 1e-8, 0.01});
  Eigen::VectorXd p{{1.0, -2.0}};
  adam.Step(p, Eigen::VectorXd{{0.5, -1.0}}, 0.1);
  EXPECT_NEAR(p[0], 0.899000001999999960, 1e-15);
  EXPECT_NEAR(p[1], -1.898000000999999990, 1e-15);
  EXPECT_NEAR(adam.first_moment()[0], 0.05, 1e-16);
  EXPECT_NEAR(adam.second_moment()[1], 0.001, 1e-18);
  adam.Step(p, Eigen::VectorXd{{0.1, 0.3}}, 0.1);
  EXPECT_NEAR(p[0], 0.817796906382651210, 1e-15);
  EXPECT_NEAR(p[1], -1.853317142428226070, 1e-15);
  EXPECT_EQ(adam.step_count(), 2);
  adam.Reset();
  EXPECT_EQ(adam.step_count(), 0);
  EXPECT_TRUE(adam.first_moment().isZero());
}

TEST(AdamW, FirstStepMovesByLearningRateAndZeroGradientsStillDecay) {
  AdamW<double> adam(3, AdamWOptions{0.9, 0.999, 1e-8, 0.5});
  Eigen::VectorXd p{{1.0, 1.0, 1.0}};
  adam.Step(p, Eigen::VectorXd{{1e-3, -4.0, 0.0}}, 0.01);
  // Bias correction makes the first update lr * g / (|g| + eps).
  EXPECT_NEAR(p[0], 1.0 * (1 - 0.005) - 0.01 * 1e-3 / (1e-3 + 1e-8), 1e-15);
  EXPECT_NEAR(p[1], 1.0 * (1 - 0.005) + 0.01 * 4.0 / (4.0 + 1e-8), 1e-15);
  EXPECT_DOUBLE_EQ(p[2], 0.995);  // decay only (AdamW decouples it from the gradient)
}

TEST(AdamW, FloatTracksDouble) {
  AdamW<double> ad(4, AdamWOptions{});
  AdamW<float> af(4, AdamWOptions{});
  Eigen::VectorXd pd{{0.5, -0.25, 2.0, 0.0}};
  Eigen::VectorXf pf = pd.cast<float>();
  for (int t = 0; t < 20; ++t) {
    const Eigen::VectorXd g{{std::sin(t), std::cos(3.0 * t), 0.1 * t, -1.0}};
    ad.Step(pd, g, 1e-2);
    af.Step(pf, g.cast<float>(), 1e-2);
  }
  EXPECT_LT((pf.cast<double>() - pd).cwiseAbs().maxCoeff(), 1e-6);
}

// torch.nn.utils.clip_grad_norm_ (PyTorch 1.13): coef = max / (norm + 1e-6),
// applied when < 1; returns the norm before clipping.
TEST(ClipGlobalNorm, ScalesOnlyAboveTheLimitAndReturnsThePriorNorm) {
  Eigen::VectorXd g{{3.0, 4.0}};
  EXPECT_DOUBLE_EQ(ClipGlobalNorm(g, 1.0), 5.0);
  EXPECT_DOUBLE_EQ(g[0], 3.0 * (1.0 / (5.0 + 1e-6)));
  EXPECT_DOUBLE_EQ(g[1], 4.0 * (1.0 / (5.0 + 1e-6)));
  EXPECT_NEAR(g.norm(), 1.0, 1e-6);

  Eigen::VectorXd small{{0.3, 0.4}};
  EXPECT_DOUBLE_EQ(ClipGlobalNorm(small, 1.0), 0.5);
  EXPECT_EQ(small, (Eigen::VectorXd{{0.3, 0.4}}));

  // Exactly at the limit: the 1e-6 makes coef slightly < 1, as in torch.
  Eigen::VectorXd edge{{3.0, 4.0}};
  ClipGlobalNorm(edge, 5.0);
  EXPECT_LT(edge[0], 3.0);

  Eigen::VectorXf gf{{0.0f, 12.0f}};
  EXPECT_DOUBLE_EQ(ClipGlobalNorm(gf, 6.0), 12.0);
  EXPECT_NEAR(gf[1], 6.0f, 1e-5f);

  Eigen::VectorXd bad{{NAN, 1.0}};
  EXPECT_TRUE(std::isnan(ClipGlobalNorm(bad, 1.0)));
  EXPECT_EQ(bad[1], 1.0);  // left alone; the trainer skips the step
}

TEST(LearningRateSchedule, ConstantWarmupAndCosine) {
  LearningRateSchedule constant;
  EXPECT_EQ(constant.At(0), 1e-3);
  EXPECT_EQ(constant.At(100000), 1e-3);

  LearningRateSchedule warm{.base = 0.1, .warmup_iterations = 4};
  EXPECT_DOUBLE_EQ(warm.At(-3), 0.025);
  EXPECT_DOUBLE_EQ(warm.At(0), 0.025);
  EXPECT_DOUBLE_EQ(warm.At(3), 0.1);
  EXPECT_DOUBLE_EQ(warm.At(4), 0.1);

  LearningRateSchedule cosine{.base = 0.1, .warmup_iterations = 10,
                              .kind = LearningRateSchedule::Kind::kCosine, .total_iterations = 110,
                              .floor_fraction = 0.2};
  EXPECT_DOUBLE_EQ(cosine.At(5), 0.06);
  EXPECT_DOUBLE_EQ(cosine.At(10), 0.1);
  EXPECT_DOUBLE_EQ(cosine.At(60), 0.1 * (0.2 + 0.8 * 0.5));
  EXPECT_DOUBLE_EQ(cosine.At(35), 0.1 * (0.2 + 0.8 * 0.5 * (1 + std::cos(std::numbers::pi / 4))));
  EXPECT_DOUBLE_EQ(cosine.At(110), 0.02);
  EXPECT_DOUBLE_EQ(cosine.At(5000), 0.02);
  // Monotone after warm-up.
  for (int i = 10; i < 120; ++i) EXPECT_LE(cosine.At(i + 1), cosine.At(i));

  LearningRateSchedule degenerate{.base = 1.0, .warmup_iterations = 5,
                                  .kind = LearningRateSchedule::Kind::kCosine, .total_iterations = 3};
  EXPECT_DOUBLE_EQ(degenerate.At(6), 0.1);
}

}  // namespace
}  // namespace lyapcast
