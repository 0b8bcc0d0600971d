// FlowMap: the residual form G(x) = x + dt S ⊙ N((x - m) ⊘ s) (docs/design.md
// "Learning"), its gradients (central finite differences, as in
// mlp_test.cpp), a 3-step composition backpropagated through dX (what the
// trainer does for k-step pairs), the Jacobian, and Refit keeping G.
#include "learn/flow_map.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstring>

#include "learn/learn_test_util.h"

namespace lyapcast {
namespace {

using testing::ExpectGradientMatches;
using testing::MseLoss;
using testing::RandomMatrix;
using testing::RandomVector;
using Mat = Eigen::MatrixXd;
using Vec = Eigen::VectorXd;

// Statistics for the tests: different scales per channel, but kept so the
// losses are O(1) and central differences stay accurate (rounding of the
// loss ~ eps |x| / h).
const Vec kMean{{1.5, -4.0, 0.2}};
const Vec kStd{{0.7, 2.0, 0.05}};
const Vec kScale{{2.0, 30.0, 0.4}};

// A 3-channel map with nonzero m, s, S, mu and biases.
FlowMap<double> MakeMap(Activation act, std::vector<int> hidden = {16, 16}, std::uint64_t seed = 5) {
  auto created = FlowMap<double>::Create(3, hidden, act, 0.05);
  EXPECT_TRUE(created.ok()) << created.status().ToString();
  FlowMap<double> map = std::move(created.value());
  map.InitRandom(seed);
  EXPECT_TRUE(map.SetNormalization(kMean, kStd, kScale).ok());
  map.mu() = Vec{{0.1, -0.2, 0.3}};
  for (int l = 0; l < map.network().layers(); ++l) {
    map.network().b(l) = RandomVector(map.network().layout().out(l), seed + 10 + l, -0.2, 0.2);
  }
  return map;
}

// Inputs on the scale of the statistics above.
Mat Inputs(Eigen::Index batch, std::uint64_t seed) {
  Mat X = RandomMatrix(3, batch, seed);
  for (Eigen::Index j = 0; j < batch; ++j) X.col(j) = kMean + kStd.cwiseProduct(X.col(j)) * 1.5;
  return X;
}

// Targets near the inputs, so the loss is O(1).
Mat Targets(const Mat& X, std::uint64_t seed) { return X + 0.5 * RandomMatrix(X.rows(), X.cols(), seed);
}

TEST(FlowMapCreate, ValidatesArguments) {
  EXPECT_EQ(FlowMap<double>::Create(0, {8}, Activation::kTanh, 0.1).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(FlowMap<double>::Create(3, {8}, Activation::kTanh, 0.0).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(FlowMap<double>::Create(3, {8}, Activation::kTanh, NAN).status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(FlowMap<double>::Create(3, {0}, Activation::kTanh, 0.1).status().code(), StatusCode::kInvalidArgument);
  const auto huge = FlowMap<float>::Create(3, {1'000'000'000}, Activation::kTanh, 0.1);
  EXPECT_EQ(huge.status().code(), StatusCode::kInvalidArgument);
  auto map = FlowMap<float>::Create(3, {64, 64}, Activation::kTanh, 0.5);
  ASSERT_TRUE(map.ok());
  EXPECT_EQ(map->hidden(), (std::vector<int>{64, 64}));
  EXPECT_EQ(map->activation(), Activation::kTanh);
  EXPECT_EQ(map->dt(), 0.5);
  EXPECT_EQ(map->parameters().size(), MlpParameterCount({3, 64, 64, 3}) + 3);  // + mu
  EXPECT_EQ(map->mu().data(), map->parameters().data() + map->layout().network_size);
  EXPECT_TRUE(map->mu().isZero());
  EXPECT_EQ(map->stddev(), Eigen::VectorXf::Ones(3));
}

TEST(FlowMapCreate, NormalizationIsValidated) {
  FlowMap<double> map = MakeMap(Activation::kTanh);
  const Vec before = map.mean();
  EXPECT_EQ(map.SetNormalization(Vec::Zero(3), Vec{{1.0, 0.0, 1.0}}, Vec::Ones(3)).code(),
            StatusCode::kInvalidArgument);
  EXPECT_EQ(map.Refit(Vec::Zero(3), Vec::Ones(3), Vec{{1.0, -1.0, 1.0}}).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(map.Refit(Vec{{NAN, 0.0, 0.0}}, Vec::Ones(3), Vec::Ones(3)).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(map.SetNormalization(Vec::Zero(2), Vec::Ones(2), Vec::Ones(2)).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(map.mean(), before);
}

TEST(FlowMapForward, IsTheResidualForm) {
  const FlowMap<double> map = MakeMap(Activation::kSilu);
  const Mat X = Inputs(5, 1);
  Mat Y, N;
  FlowMapCache<double> cache;
  MlpCache<double> net_cache;
  map.Forward(X, &Y, &cache);
  Mat Xn = X;
  for (int c = 0; c < 3; ++c) Xn.row(c) = (X.row(c).array() - map.mean()[c]) / map.stddev()[c];
  map.network().Forward(Xn, &N, &net_cache);
  for (int c = 0; c < 3; ++c) {
    const Eigen::RowVectorXd expected = X.row(c) + map.dt() * map.increment_scale()[c] * N.row(c);
    EXPECT_LT((Y.row(c) - expected).cwiseAbs().maxCoeff(), 1e-12 * (1 + expected.cwiseAbs().maxCoeff()));
  }
  // Y may alias X.
  Mat Z = X;
  map.Forward(Z, &Z, &cache);
  EXPECT_EQ(Z, Y);
}

void CheckFlowMapGradients(Activation act) {
  SCOPED_TRACE(ActivationName(act));
  FlowMap<double> map = MakeMap(act);
  Mat X = Inputs(7, 2);
  const Mat target = Targets(X, 3);
  FlowMapCache<double> cache;
  Mat Y, dY, dX;
  map.Forward(X, &Y, &cache);
  MseLoss(Y, target, &dY);
  FlowMapGrads<double> grads = map.MakeGrads();
  map.Backward(cache, dY, &grads, &dX);
  EXPECT_TRUE(grads.mu().isZero());  // G does not use mu

  auto loss = [&] {
    FlowMapCache<double> c;
    Mat y;
    map.Forward(X, &y, &c);
    return MseLoss(y, target);
  };
  ExpectGradientMatches(loss, map.parameters().data(), grads.flat().data(), map.parameters().size(), "parameters");
  ExpectGradientMatches(loss, X.data(), dX.data(), X.size(), "input");
}

TEST(FlowMapBackward, GradientsMatchFiniteDifferences) {
  CheckFlowMapGradients(Activation::kTanh);
  CheckFlowMapGradients(Activation::kSilu);
}

// L = MSE(G(G(G(x))), target), backpropagated step by step: each step's dX
// becomes the previous step's dY, parameter gradients accumulate.
TEST(FlowMapBackward, ThreeStepCompositionChainsThroughDx) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    SCOPED_TRACE(ActivationName(act));
    FlowMap<double> map = MakeMap(act);
    Mat X = Inputs(5, 4);
    const Mat target = Targets(X, 5);
    std::vector<FlowMapCache<double>> caches(3);
    std::vector<Mat> states(4);
    states[0] = X;
    for (int k = 0; k < 3; ++k) map.Forward(states[static_cast<size_t>(k)], &states[static_cast<size_t>(k) + 1],
                                            &caches[static_cast<size_t>(k)]);
    Mat d;
    MseLoss(states[3], target, &d);
    FlowMapGrads<double> grads = map.MakeGrads();
    for (int k = 2; k >= 0; --k) map.Backward(caches[static_cast<size_t>(k)], d, &grads, &d);  // dX aliases dY

    auto loss = [&] {
      FlowMapCache<double> c;
      Mat y = X;
      for (int k = 0; k < 3; ++k) map.Forward(y, &y, &c);
      return MseLoss(y, target);
    };
    ExpectGradientMatches(loss, map.parameters().data(), grads.flat().data(), map.parameters().size(),
                          "parameters");
    ExpectGradientMatches(loss, X.data(), d.data(), X.size(), "input");
  }
}

TEST(FlowMapJacobian, MatchesFiniteDifferences) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    const FlowMap<double> map = MakeMap(act);
    const Vec x = Inputs(1, 6);
    Mat J;
    map.Jacobian(x, &J);
    FlowMapCache<double> cache;
    for (int i = 0; i < 3; ++i) {
      const double h = 1e-5 * map.stddev()[i];
      Mat xp = x, xm = x, yp, ym;
      xp(i) += h;
      xm(i) -= h;
      map.Forward(xp, &yp, &cache);
      map.Forward(xm, &ym, &cache);
      for (int o = 0; o < 3; ++o) {
        // J = I + ..., so its natural scale is 1: floor 1.
        EXPECT_LT(testing::RelativeError(J(o, i), (yp(o) - ym(o)) / (2 * h), 1.0), 1e-6)
            << ActivationName(act) << " J(" << o << "," << i << ")";
      }
    }
  }
}

TEST(FlowMapRefit, KeepsTheFunctionAndItsDerivatives) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    SCOPED_TRACE(ActivationName(act));
    FlowMap<double> map = MakeMap(act);
    FlowMap<double> refit = map;
    ASSERT_TRUE(refit.Refit(Vec{{1.2, -3.0, 0.25}}, Vec{{0.9, 1.5, 0.08}}, Vec{{1.5, 41.0, 0.3}}).ok());
    EXPECT_EQ(refit.mean(), (Vec{{1.2, -3.0, 0.25}}));
    const Mat X = Inputs(16, 7);
    const Mat target = Targets(X, 8);
    FlowMapCache<double> c1, c2;
    Mat y1, y2, d1, d2, dx1, dx2;
    map.Forward(X, &y1, &c1);
    refit.Forward(X, &y2, &c2);
    // Same function up to rounding of the rewritten weights.
    for (int c = 0; c < 3; ++c) {
      const double scale = std::max(1.0, y1.row(c).cwiseAbs().maxCoeff());
      EXPECT_LT((y1.row(c) - y2.row(c)).cwiseAbs().maxCoeff(), 1e-12 * scale) << "channel " << c;
    }
    // Same input gradient and Jacobian (they are properties of G).
    MseLoss(y1, target, &d1);
    MseLoss(y2, target, &d2);
    FlowMapGrads<double> g1 = map.MakeGrads(), g2 = refit.MakeGrads();
    map.Backward(c1, d1, &g1, &dx1);
    refit.Backward(c2, d2, &g2, &dx2);
    EXPECT_LT((dx1 - dx2).cwiseAbs().maxCoeff(), 1e-12 * dx1.cwiseAbs().maxCoeff());
    Mat J1, J2;
    map.Jacobian(X.col(0), &J1);
    refit.Jacobian(X.col(0), &J2);
    EXPECT_LT((J1 - J2).cwiseAbs().maxCoeff(), 1e-12);
    // Parameter gradients of the refit model are still right.
    auto loss = [&] {
      FlowMapCache<double> c;
      Mat y;
      refit.Forward(X, &y, &c);
      return MseLoss(y, target);
    };
    ExpectGradientMatches(loss, refit.parameters().data(), g2.flat().data(), refit.parameters().size(),
                          "refit parameters");
    // Refitting back restores the original weights (up to rounding).
    ASSERT_TRUE(refit.Refit(map.mean(), map.stddev(), map.increment_scale()).ok());
    EXPECT_LT((refit.parameters() - map.parameters()).cwiseAbs().maxCoeff(), 1e-12);
  }
}

TEST(FlowMapRefit, WorksWithoutHiddenLayers) {
  auto created = FlowMap<double>::Create(2, {}, Activation::kTanh, 0.1);
  ASSERT_TRUE(created.ok());
  FlowMap<double> map = created.value();
  map.InitRandom(3);
  map.network().b(0) = Vec{{0.3, -0.1}};
  FlowMap<double> refit = map;
  ASSERT_TRUE(refit.Refit(Vec{{0.5, 1.0}}, Vec{{2.0, 0.5}}, Vec{{3.0, 0.25}}).ok());
  const Mat X = RandomMatrix(2, 4, 9, -3, 3);
  FlowMapCache<double> c;
  Mat y1, y2;
  map.Forward(X, &y1, &c);
  refit.Forward(X, &y2, &c);
  EXPECT_LT((y1 - y2).cwiseAbs().maxCoeff(), 1e-12);
}

TEST(FlowMapDeterminism, FixedSeedGivesIdenticalModelsAndOutputs) {
  const FlowMap<double> a = MakeMap(Activation::kTanh, {16, 16}, 99);
  const FlowMap<double> b = MakeMap(Activation::kTanh, {16, 16}, 99);
  ASSERT_EQ(std::memcmp(a.parameters().data(), b.parameters().data(), sizeof(double) * a.parameters().size()), 0);
  const Mat X = Inputs(8, 10);
  FlowMapCache<double> ca, cb;
  Mat ya, yb;
  a.Forward(X, &ya, &ca);
  b.Forward(X, &yb, &cb);
  EXPECT_EQ(std::memcmp(ya.data(), yb.data(), sizeof(double) * ya.size()), 0);
}

TEST(FlowMapPrecision, FloatAgreesWithDouble) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    const FlowMap<double> map = MakeMap(act, {64, 64});
    const FlowMap<float> mapf = map.Cast<float>();
    EXPECT_EQ(mapf.dt(), map.dt());
    EXPECT_EQ(mapf.mu(), map.mu().cast<float>());
    const Mat X = Inputs(32, 11);
    FlowMapCache<double> c;
    FlowMapCache<float> cf;
    Mat y;
    Eigen::MatrixXf yf;
    map.Forward(X, &y, &c);
    mapf.Forward(X.cast<float>(), &yf, &cf);
    // Per channel, the error is float rounding of x itself (rel 6e-8 of |x|)
    // plus that of the increment dt S N (rel ~1e-6 through a 64-wide net).
    for (int ch = 0; ch < 3; ++ch) {
      const double xscale = X.row(ch).cwiseAbs().maxCoeff();
      const double inc = (y.row(ch) - X.row(ch)).cwiseAbs().maxCoeff();
      EXPECT_LT((yf.row(ch).cast<double>() - y.row(ch)).cwiseAbs().maxCoeff(), 2e-7 * xscale + 1e-5 * inc)
          << ActivationName(act) << " channel " << ch;
    }
  }
}

}  // namespace
}  // namespace lyapcast
