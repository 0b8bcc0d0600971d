// Mlp: layout, deterministic Glorot initialization, Forward against a
// per-sample reference, Backward against central finite differences (the
// standard gradient check, e.g. Goodfellow, Bengio & Courville, "Deep
// Learning", MIT Press 2016, section 11.5), Jacobian, float vs double.
#include "learn/mlp.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <random>

#include "learn/learn_test_util.h"

namespace lyapcast {
namespace {

using testing::ExpectGradientMatches;
using testing::MseLoss;
using testing::RandomMatrix;
using testing::RandomVector;
using Mat = Eigen::MatrixXd;
using Vec = Eigen::VectorXd;

// Per-sample, per-unit reference forward pass: no Eigen products, so it
// checks the batched kernels independently.
Mat NaiveForward(const Mlp<double>& net, const Mat& X) {
  Mat Y(net.output_size(), X.cols());
  for (Eigen::Index j = 0; j < X.cols(); ++j) {
    std::vector<double> h(X.col(j).data(), X.col(j).data() + X.rows());
    for (int l = 0; l < net.layers(); ++l) {
      std::vector<double> z(static_cast<size_t>(net.layout().out(l)));
      for (int o = 0; o < net.layout().out(l); ++o) {
        double acc = net.b(l)[o];
        for (int i = 0; i < net.layout().in(l); ++i) acc += net.W(l)(o, i) * h[static_cast<size_t>(i)];
        if (l + 1 < net.layers()) {
          acc = net.activation() == Activation::kTanh ? std::tanh(acc) : acc / (1.0 + std::exp(-acc));
        }
        z[static_cast<size_t>(o)] = acc;
      }
      h = z;
    }
    for (int o = 0; o < net.output_size(); ++o) Y(o, j) = h[static_cast<size_t>(o)];
  }
  return Y;
}

Mlp<double> RandomNet(const std::vector<int>& sizes, Activation act, std::uint64_t seed) {
  Mlp<double> net(sizes, act);
  net.InitRandom(seed);
  // Nonzero biases so their gradients and the bias broadcast are exercised.
  for (int l = 0; l < net.layers(); ++l) net.b(l) = RandomVector(net.layout().out(l), seed + 100 + l, -0.3, 0.3);
  return net;
}

TEST(MlpShape, LayoutIsContiguousWeightsThenBiasesPerLayer) {
  Mlp<double> net({3, 16, 16, 3}, Activation::kTanh, /*extra=*/3);
  EXPECT_EQ(net.layers(), 3);
  EXPECT_EQ(net.layout().network_size, 3 * 16 + 16 + 16 * 16 + 16 + 16 * 3 + 3);
  EXPECT_EQ(net.parameters().size(), net.layout().network_size + 3);
  EXPECT_EQ(net.W(0).data(), net.parameters().data());
  EXPECT_EQ(net.b(0).data(), net.parameters().data() + 48);
  EXPECT_EQ(net.W(1).data(), net.parameters().data() + 64);
  EXPECT_EQ(net.extra().data(), net.parameters().data() + net.layout().network_size);
  // Column-major W: element (row 1, col 2) of layer 0 is flat index 2 * 16 + 1.
  net.W(0)(1, 2) = 7.0;
  EXPECT_EQ(net.parameters()[33], 7.0);
  EXPECT_EQ(MlpParameterCount({3, 64, 64, 3}), 3 * 64 + 64 + 64 * 64 + 64 + 64 * 3 + 3);
}

TEST(MlpShape, ValidateRejectsBadShapes) {
  EXPECT_TRUE(ValidateMlpShape({3, 64, 64, 3}).ok());
  EXPECT_TRUE(ValidateMlpShape({3, 3}).ok());
  EXPECT_EQ(ValidateMlpShape({3}).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(ValidateMlpShape({3, 0, 3}).code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(ValidateMlpShape({3, 1'000'000'000, 3}).code(), StatusCode::kInvalidArgument);
  EXPECT_NE(ValidateMlpShape({3, 1'000'000'000, 3}).message().find("1000000000"), std::string::npos);
  EXPECT_EQ(ValidateMlpShape({3, 65536, 65536, 3}).code(), StatusCode::kInvalidArgument);  // 4.3e9 parameters
  EXPECT_EQ(ValidateMlpShape(std::vector<int>(70, 4)).code(), StatusCode::kInvalidArgument);
}

TEST(MlpInit, FixedSeedGivesIdenticalWeightsAndOutputs) {
  Mlp<double> a({3, 16, 16, 3}, Activation::kSilu);
  Mlp<double> b({3, 16, 16, 3}, Activation::kSilu);
  a.InitRandom(42);
  b.InitRandom(42);
  ASSERT_EQ(std::memcmp(a.parameters().data(), b.parameters().data(), sizeof(double) * a.parameters().size()), 0);
  const Mat X = RandomMatrix(3, 9, 1);
  Mat ya, yb;
  MlpCache<double> ca, cb;
  a.Forward(X, &ya, &ca);
  b.Forward(X, &yb, &cb);
  EXPECT_EQ(std::memcmp(ya.data(), yb.data(), sizeof(double) * ya.size()), 0);
  Mlp<double> c({3, 16, 16, 3}, Activation::kSilu);
  c.InitRandom(43);
  EXPECT_NE(c.parameters(), a.parameters());
}

TEST(MlpInit, GlorotUniformWithTheDocumentedMapping) {
  Mlp<double> net({3, 200, 5}, Activation::kTanh, 2);
  net.extra().setConstant(9.0);
  net.InitRandom(7);
  // First weight: the first mt19937_64 output through u = (x >> 11) 2^-53,
  // w = a (2u - 1), a = sqrt(6 / (3 + 200)) (Glorot & Bengio, AISTATS 2010).
  std::mt19937_64 rng(7);
  const double a0 = std::sqrt(6.0 / 203.0);
  const double u = static_cast<double>(rng() >> 11) * 0x1.0p-53;
  EXPECT_EQ(net.W(0)(0, 0), a0 * (2.0 * u - 1.0));
  EXPECT_LE(net.W(0).cwiseAbs().maxCoeff(), a0);
  const double a1 = std::sqrt(6.0 / 205.0);
  EXPECT_LE(net.W(1).cwiseAbs().maxCoeff(), a1);
  EXPECT_TRUE(net.b(0).isZero());
  EXPECT_TRUE(net.b(1).isZero());
  EXPECT_EQ(net.extra(), Vec::Constant(2, 9.0));  // untouched
  // U(-a, a) has variance a^2 / 3; 600 draws: standard error of the sample
  // variance ~ a^2 * 0.0075, so 10 % is > 5 sigma.
  const auto w = net.W(0).array();
  const double var = w.square().mean() - w.mean() * w.mean();
  EXPECT_NEAR(var, a0 * a0 / 3.0, 0.1 * a0 * a0 / 3.0);
  // Float weights are the float rounding of the double weights.
  Mlp<float> f({3, 200, 5}, Activation::kTanh, 2);
  f.InitRandom(7);
  EXPECT_EQ(f.parameters().head(net.layout().network_size),
            net.parameters().head(net.layout().network_size).cast<float>());
}

TEST(MlpForward, MatchesPerSampleReference) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    const Mlp<double> net = RandomNet({3, 16, 8, 2}, act, 3);
    const Mat X = RandomMatrix(3, 11, 4, -2.0, 2.0);
    Mat Y;
    MlpCache<double> cache;
    net.Forward(X, &Y, &cache);
    EXPECT_LT((Y - NaiveForward(net, X)).cwiseAbs().maxCoeff(), 1e-14) << ActivationName(act);
  }
}

TEST(MlpForward, CacheReuseAcrossBatchSizesAndAliasing) {
  const Mlp<double> net = RandomNet({3, 16, 3}, Activation::kSilu, 5);
  MlpCache<double> cache;
  Mat Y;
  for (int batch : {7, 2, 7, 1}) {
    const Mat X = RandomMatrix(3, batch, static_cast<std::uint64_t>(batch));
    net.Forward(X, &Y, &cache);
    EXPECT_LT((Y - NaiveForward(net, X)).cwiseAbs().maxCoeff(), 1e-14) << batch;
  }
  // Y may be the input itself (rollouts reuse one buffer).
  Mat X = RandomMatrix(3, 4, 8);
  const Mat expected = NaiveForward(net, X);
  net.Forward(X, &X, &cache);
  EXPECT_LT((X - expected).cwiseAbs().maxCoeff(), 1e-14);
}

// Gradient check of MSE(N(X), target) w.r.t. every weight, bias and input.
void CheckMlpGradients(const std::vector<int>& sizes, Activation act) {
  SCOPED_TRACE(::testing::Message() << ActivationName(act) << " with " << sizes.size() - 2 << " hidden layers");
  Mlp<double> net = RandomNet(sizes, act, 11);
  Mat X = RandomMatrix(sizes.front(), 6, 12, -1.5, 1.5);
  const Mat target = RandomMatrix(sizes.back(), 6, 13);
  MlpCache<double> cache;
  Mat Y, dY, dX;
  net.Forward(X, &Y, &cache);
  MseLoss(Y, target, &dY);
  MlpGrads<double> grads(net.layout());
  net.Backward(cache, dY, &grads, &dX);

  auto loss = [&] {
    MlpCache<double> c;
    Mat y;
    net.Forward(X, &y, &c);
    return MseLoss(y, target);
  };
  ExpectGradientMatches(loss, net.parameters().data(), grads.flat().data(), net.layout().network_size, "parameters");
  ExpectGradientMatches(loss, X.data(), dX.data(), X.size(), "input");
}

TEST(MlpBackward, GradientsMatchFiniteDifferences) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    CheckMlpGradients({3, 16, 16, 3}, act);
    CheckMlpGradients({2, 5, 4}, act);
    CheckMlpGradients({3, 3}, act);  // a single affine layer
  }
}

TEST(MlpBackward, AccumulatesIntoGradsAndLeavesExtraSlots) {
  Mlp<double> net({3, 8, 3}, Activation::kTanh, 2);
  net.InitRandom(1);
  const Mat X = RandomMatrix(3, 5, 2);
  const Mat dY = RandomMatrix(3, 5, 3);
  MlpCache<double> cache;
  Mat Y, dX;
  net.Forward(X, &Y, &cache);
  MlpGrads<double> once(net.layout()), twice(net.layout());
  net.Backward(cache, dY, &once, &dX);
  twice.extra().setConstant(5.0);
  net.Backward(cache, dY, &twice, nullptr);
  net.Backward(cache, dY, &twice, nullptr);
  const auto n = net.layout().network_size;
  EXPECT_LT((twice.flat().head(n) - 2.0 * once.flat().head(n)).cwiseAbs().maxCoeff(), 1e-15);
  EXPECT_EQ(twice.extra(), Vec::Constant(2, 5.0));
  EXPECT_TRUE(once.extra().isZero());
}

TEST(MlpJacobian, MatchesFiniteDifferencesAndBackward) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    const Mlp<double> net = RandomNet({3, 16, 16, 2}, act, 21);
    const Vec x = RandomVector(3, 22);
    Mat J;
    net.Jacobian(x, &J);
    ASSERT_EQ(J.rows(), 2);
    ASSERT_EQ(J.cols(), 3);
    MlpCache<double> cache;
    for (int i = 0; i < 3; ++i) {
      const double h = 1e-5;
      Mat xp = x, xm = x, yp, ym;
      xp(i) += h;
      xm(i) -= h;
      net.Forward(xp, &yp, &cache);
      net.Forward(xm, &ym, &cache);
      const Vec col = (yp - ym) / (2 * h);
      for (int o = 0; o < 2; ++o) EXPECT_LT(testing::RelativeError(J(o, i), col(o)), 1e-6);
    }
    // J^T v equals the input gradient of Backward at a single sample.
    const Mat v = RandomMatrix(2, 1, 23);
    Mat y, dX;
    MlpGrads<double> grads(net.layout());
    net.Forward(x, &y, &cache);
    net.Backward(cache, v, &grads, &dX);
    EXPECT_LT((J.transpose() * v - dX).cwiseAbs().maxCoeff(), 1e-14);
  }
}

TEST(MlpPrecision, FloatForwardAgreesWithDouble) {
  for (Activation act : {Activation::kTanh, Activation::kSilu}) {
    const Mlp<double> net = RandomNet({3, 64, 64, 3}, act, 31);
    const Mlp<float> netf = net.Cast<float>();
    const Mat X = RandomMatrix(3, 64, 32, -2.0, 2.0);
    Mat Y;
    Eigen::MatrixXf Yf;
    MlpCache<double> cache;
    MlpCache<float> cachef;
    net.Forward(X, &Y, &cache);
    netf.Forward(X.cast<float>(), &Yf, &cachef);
    // Float rounding (eps 1.2e-7) of inputs, weights and sums over 64 terms,
    // plus Eigen's float tanh/logistic (a few ulp): well under 1e-5 of the
    // output scale.
    const double scale = Y.cwiseAbs().maxCoeff();
    EXPECT_LT((Yf.cast<double>() - Y).cwiseAbs().maxCoeff(), 1e-5 * scale) << ActivationName(act);
    // Cast back: the float values exactly.
    EXPECT_EQ(netf.Cast<double>().parameters(), netf.parameters().cast<double>());
  }
}

TEST(MlpFlops, CountsFor3x64x64x3) {
  const Mlp<float> net({3, 64, 64, 3}, Activation::kTanh);
  // 2 (3*64 + 64*64 + 64*3) + (64 + 64 + 3)
  EXPECT_EQ(net.ForwardFlopsPerSample(), 9091);
  // backward: dW, db of all layers (8960 + 131) + dA of layers 1, 2 (2 (4096 + 192) + 64 + 64)
  EXPECT_EQ(net.TrainingFlopsPerSample(), 9091 + 9091 + 8576 + 128);
}

}  // namespace
}  // namespace lyapcast
