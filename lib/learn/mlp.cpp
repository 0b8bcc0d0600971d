#include "learn/mlp.h"

#include <fmt/format.h>

#include <cassert>
#include <cmath>
#include <random>

namespace lyapcast {

Status ValidateMlpShape(const std::vector<int>& sizes) {
  if (sizes.size() < 2) {
    return Status::Invalid(fmt::format("a network needs an input and an output size; got {} sizes", sizes.size()));
  }
  if (sizes.size() > static_cast<size_t>(kMaxMlpLayers) + 1) {
    return Status::Invalid(
        fmt::format("a network has at most {} layers; got {}", kMaxMlpLayers, sizes.size() - 1));
  }
  for (size_t i = 0; i < sizes.size(); ++i) {
    if (sizes[i] < 1 || sizes[i] > kMaxMlpWidth) {
      return Status::Invalid(fmt::format("layer width {} (entry {} of in, hidden..., out) is outside [1, {}]",
                                         sizes[i], i, kMaxMlpWidth));
    }
  }
  const std::int64_t count = MlpParameterCount(sizes);
  if (count > kMaxMlpParameters) {
    return Status::Invalid(
        fmt::format("the network would have {} parameters; at most {} are allowed", count, kMaxMlpParameters));
  }
  return Status::Ok();
}

std::int64_t MlpParameterCount(const std::vector<int>& sizes) {
  std::int64_t count = 0;
  for (size_t l = 0; l + 1 < sizes.size(); ++l) {
    count += std::int64_t{sizes[l + 1]} * sizes[l] + sizes[l + 1];
  }
  return count;
}

MlpLayout MlpLayout::Make(const std::vector<int>& sizes, Eigen::Index extra) {
  MlpLayout layout;
  layout.sizes = sizes;
  layout.extra = extra;
  Eigen::Index offset = 0;
  for (size_t l = 0; l + 1 < sizes.size(); ++l) {
    layout.weight_offset.push_back(offset);
    offset += Eigen::Index{sizes[l + 1]} * sizes[l] + sizes[l + 1];
  }
  layout.network_size = offset;
  return layout;
}

template <typename T>
Mlp<T>::Mlp(const std::vector<int>& sizes, Activation activation, Eigen::Index extra)
    : layout_(MlpLayout::Make(sizes, extra)), activation_(activation), params_(Vec::Zero(layout_.total())) {
  assert(ValidateMlpShape(sizes).ok());
  assert(extra >= 0);
}

template <typename T>
void Mlp<T>::InitRandom(std::uint64_t seed) {
  std::mt19937_64 rng(seed);
  for (int l = 0; l < layers(); ++l) {
    const double limit = std::sqrt(6.0 / static_cast<double>(layout_.in(l) + layout_.out(l)));
    auto w = W(l);
    for (Eigen::Index i = 0; i < w.size(); ++i) {
      // 53 random bits -> exactly representable double in [0, 1).
      const double u = static_cast<double>(rng() >> 11) * 0x1.0p-53;
      w.data()[i] = static_cast<T>(limit * (2.0 * u - 1.0));
    }
    b(l).setZero();
  }
}

template <typename T>
void Mlp<T>::Forward(const Mat& X, Mat* Y, MlpCache<T>* cache) const {
  assert(X.rows() == input_size() && X.cols() >= 1);
  const int L = layers();
  const size_t hidden = static_cast<size_t>(L - 1);
  cache->act.resize(static_cast<size_t>(L));
  cache->dpre.resize(hidden);
  if (activation_ == Activation::kSilu) {
    cache->pre.resize(hidden);
    cache->sig.resize(hidden);
  }
  cache->act[0] = X;  // copied: Y may alias X, and Backward needs the input
  for (int l = 0; l + 1 < L; ++l) {
    const size_t k = static_cast<size_t>(l);
    Mat& a = cache->act[k + 1];
    if (activation_ == Activation::kTanh) {
      a.noalias() = W(l) * cache->act[k];
      a.colwise() += b(l);
      a.array() = a.array().tanh();
    } else {
      Mat& z = cache->pre[k];
      Mat& s = cache->sig[k];
      z.noalias() = W(l) * cache->act[k];
      z.colwise() += b(l);
      s.array() = z.array().logistic();
      a.array() = z.array() * s.array();
    }
  }
  Y->noalias() = W(L - 1) * cache->act[hidden];
  Y->colwise() += b(L - 1);
}

template <typename T>
void Mlp<T>::Backward(const MlpCache<T>& cache, const Mat& dY, MlpGrads<T>* grads, Mat* dX) const {
  const int L = layers();
  assert(static_cast<int>(cache.act.size()) == L);
  assert(dY.rows() == output_size() && dY.cols() == cache.batch());
  assert(grads->flat().size() == layout_.total());
  assert(dX != &dY);
  for (int l = L - 1; l >= 0; --l) {
    const size_t k = static_cast<size_t>(l);
    // Gradient w.r.t. layer l's pre-activation (the output layer is linear).
    const Mat& dz = l == L - 1 ? dY : cache.dpre[k];
    grads->W(l).noalias() += dz * cache.act[k].transpose();
    grads->b(l) += dz.rowwise().sum();
    if (l > 0) {
      Mat& dprev = cache.dpre[k - 1];
      dprev.noalias() = W(l).transpose() * dz;
      if (activation_ == Activation::kTanh) {
        // tanh' = 1 - tanh^2, from the stored outputs.
        dprev.array() *= T(1) - cache.act[k].array().square();
      } else {
        // silu'(z) = s (1 + z (1 - s)), s = sigmoid(z).
        const auto s = cache.sig[k - 1].array();
        dprev.array() *= s * (T(1) + cache.pre[k - 1].array() * (T(1) - s));
      }
    } else if (dX != nullptr) {
      dX->noalias() = W(0).transpose() * dz;
    }
  }
}

template <typename T>
void Mlp<T>::Jacobian(const Vec& x, Mat* J) const {
  MlpJacobianScratch<T> scratch;
  Jacobian(x, J, &scratch);
}

template <typename T>
void Mlp<T>::Jacobian(const Vec& x, Mat* J, MlpJacobianScratch<T>* scratch) const {
  assert(x.size() == input_size());
  const int L = layers();
  // Chain rule: J = W_{L-1} D_{L-2} W_{L-2} ... D_0 W_0 with D_l the
  // diagonal of activation derivatives of hidden layer l at x. `a` holds
  // D_l W_l ... D_0 W_0 so far.
  Mat& a = scratch->a;
  Mat& t = scratch->b;
  Vec& h = scratch->h;
  Vec& z = scratch->z;
  h = x;
  for (int l = 0; l + 1 < L; ++l) {
    z.noalias() = W(l) * h;
    z += b(l);
    // z becomes the derivative, h the layer output.
    if (activation_ == Activation::kTanh) {
      h.array() = z.array().tanh();
      z.array() = T(1) - h.array().square();
    } else {
      h.array() = z.array().logistic();  // sigmoid, for now
      for (Eigen::Index i = 0; i < z.size(); ++i) {
        const T zi = z[i];
        const T si = h[i];
        h[i] = zi * si;
        z[i] = si * (T(1) + zi * (T(1) - si));
      }
    }
    if (l == 0) {
      a.noalias() = z.asDiagonal() * W(0);
    } else {
      t.noalias() = W(l) * a;
      a.noalias() = z.asDiagonal() * t;
    }
  }
  if (L == 1) {
    *J = W(0);
  } else {
    J->noalias() = W(L - 1) * a;
  }
}

template <typename T>
std::int64_t Mlp<T>::ForwardFlopsPerSample() const {
  std::int64_t flops = 0;
  for (int l = 0; l < layers(); ++l) {
    flops += 2 * std::int64_t{layout_.in(l)} * layout_.out(l) + layout_.out(l);
  }
  return flops;
}

template <typename T>
std::int64_t Mlp<T>::TrainingFlopsPerSample() const {
  std::int64_t backward = 0;
  for (int l = 0; l < layers(); ++l) {
    const std::int64_t in = layout_.in(l), out = layout_.out(l);
    backward += 2 * in * out + out;       // dW, db
    if (l > 0) backward += 2 * in * out + in;  // dA of the previous layer, times the derivative
  }
  return ForwardFlopsPerSample() + backward;
}

template class Mlp<float>;
template class Mlp<double>;

}  // namespace lyapcast
