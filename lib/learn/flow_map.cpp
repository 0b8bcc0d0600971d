#include "learn/flow_map.h"

#include <fmt/format.h>

#include <cassert>
#include <cmath>

namespace lyapcast {

namespace {

template <typename V>
Status CheckStatistics(const V& m, const V& s, const V& S, int channels) {
  if (m.size() != channels || s.size() != channels || S.size() != channels) {
    return Status::Invalid(fmt::format("normalization needs {} values per vector; got m: {}, s: {}, S: {}", channels,
                                       m.size(), s.size(), S.size()));
  }
  for (int c = 0; c < channels; ++c) {
    if (!std::isfinite(static_cast<double>(m[c]))) {
      return Status::Invalid(fmt::format("mean of channel {} is not finite", c));
    }
    if (!(std::isfinite(static_cast<double>(s[c])) && s[c] > 0)) {
      return Status::Invalid(fmt::format("std of channel {} must be finite and > 0; got {}", c,
                                         static_cast<double>(s[c])));
    }
    if (!(std::isfinite(static_cast<double>(S[c])) && S[c] > 0)) {
      return Status::Invalid(fmt::format("increment scale of channel {} must be finite and > 0; got {}", c,
                                         static_cast<double>(S[c])));
    }
  }
  return Status::Ok();
}

}  // namespace

template <typename T>
Result<FlowMap<T>> FlowMap<T>::Create(int channels, const std::vector<int>& hidden, Activation activation,
                                      double dt) {
  if (channels < 1) return Status::Invalid(fmt::format("a flow map needs at least one channel; got {}", channels));
  if (!(std::isfinite(dt) && dt > 0)) {
    return Status::Invalid(fmt::format("the model step dt must be finite and > 0; got {}", dt));
  }
  std::vector<int> sizes;
  sizes.push_back(channels);
  sizes.insert(sizes.end(), hidden.begin(), hidden.end());
  sizes.push_back(channels);
  if (Status st = ValidateMlpShape(sizes); !st.ok()) return st;
  FlowMap map;
  map.net_ = Mlp<T>(sizes, activation, channels);  // extra slots = mu
  map.dt_ = dt;
  map.mean_ = Vec::Zero(channels);
  map.std_ = Vec::Ones(channels);
  map.scale_ = Vec::Ones(channels);
  map.UpdateDerived();
  return map;
}

template <typename T>
std::vector<int> FlowMap<T>::hidden() const {
  const auto& sizes = net_.sizes();
  return {sizes.begin() + 1, sizes.end() - 1};
}

template <typename T>
void FlowMap<T>::UpdateDerived() {
  // dt * S formed in double, as the PyTorch reference does (`dt * S * out`).
  out_scale_ = (dt_ * scale_.template cast<double>()).template cast<T>();
}

template <typename T>
Status FlowMap<T>::SetNormalization(const Vec& m, const Vec& s, const Vec& S) {
  if (Status st = CheckStatistics(m, s, S, channels()); !st.ok()) return st;
  mean_ = m;
  std_ = s;
  scale_ = S;
  UpdateDerived();
  return Status::Ok();
}

// Refit keeps G. Let u = (x - m2) / s2 be the new network input, so
// x = s2 ⊙ u + m2 and the old input is
//   (x - m) / s = diag(s2 / s) u + (m2 - m) / s.
// The first layer's pre-activation W0 (x - m)/s + b0 therefore equals
//   W0' u + b0'  with  W0' = W0 diag(s2 / s),  b0' = b0 + W0 ((m2 - m) / s)
// (b0' uses the old W0). At the output, dt S ⊙ (WL h + bL) equals
//   dt S2 ⊙ (WL' h + bL')  with  WL' = diag(S / S2) WL,  bL' = (S / S2) ⊙ bL.
// Hidden layers see identical inputs, so every hidden activation and hence
// G(x) = x + dt S ⊙ N(...) is unchanged, up to rounding of the rewritten
// weights. With a single affine layer (no hidden layer) both rewrites apply
// to the same W0, b0: the column scaling and row scaling commute.
template <typename T>
Status FlowMap<T>::Refit(const Vec& m2, const Vec& s2, const Vec& S2) {
  if (Status st = CheckStatistics(m2, s2, S2, channels()); !st.ok()) return st;
  auto W0 = net_.W(0);
  auto b0 = net_.b(0);
  const Vec shift = ((m2 - mean_).array() / std_.array()).matrix();
  b0.noalias() += W0 * shift;
  W0.array().rowwise() *= (s2.array() / std_.array()).transpose();
  const int last = net_.layers() - 1;
  const Vec ratio = (scale_.array() / S2.array()).matrix();
  auto WL = net_.W(last);
  WL.array().colwise() *= ratio.array();
  net_.b(last).array() *= ratio.array();
  mean_ = m2;
  std_ = s2;
  scale_ = S2;
  UpdateDerived();
  return Status::Ok();
}

template <typename T>
void FlowMap<T>::InitRandom(std::uint64_t seed) {
  net_.InitRandom(seed);
  mu().setZero();
}

template <typename T>
void FlowMap<T>::Forward(const Mat& X, Mat* Y, FlowMapCache<T>* cache) const {
  assert(X.rows() == channels() && X.cols() >= 1);
  cache->xn.array() = (X.array().colwise() - mean_.array()).colwise() / std_.array();
  net_.Forward(cache->xn, &cache->out, &cache->net);
  // Coefficient-wise, so Y may alias X.
  Y->resize(X.rows(), X.cols());
  Y->array() = X.array() + cache->out.array().colwise() * out_scale_.array();
}

template <typename T>
void FlowMap<T>::Backward(const FlowMapCache<T>& cache, const Mat& dY, FlowMapGrads<T>* grads, Mat* dX) const {
  assert(dY.rows() == channels() && dY.cols() == cache.out.cols());
  cache.dout.array() = dY.array().colwise() * out_scale_.array();
  net_.Backward(cache.net, cache.dout, &grads->network(), dX != nullptr ? &cache.dxn : nullptr);
  if (dX != nullptr) {
    // Skip path plus the network path; coefficient-wise, so dX may alias dY.
    dX->resize(dY.rows(), dY.cols());
    dX->array() = dY.array() + cache.dxn.array().colwise() / std_.array();
  }
}

template <typename T>
void FlowMap<T>::Jacobian(const Vec& x, Mat* J) const {
  MlpJacobianScratch<T> scratch;
  Jacobian(x, J, &scratch);
}

template <typename T>
void FlowMap<T>::Jacobian(const Vec& x, Mat* J, MlpJacobianScratch<T>* scratch) const {
  assert(x.size() == channels());
  scratch->input.array() = (x - mean_).array() / std_.array();
  net_.Jacobian(scratch->input, J, scratch);
  // diag(dt S) J_N diag(1/s), then + I.
  J->array().colwise() *= out_scale_.array();
  J->array().rowwise() /= std_.array().transpose();
  J->diagonal().array() += T(1);
}

template class FlowMap<float>;
template class FlowMap<double>;

}  // namespace lyapcast
