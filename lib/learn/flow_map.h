// FlowMap<T>: the learned one-step map of a feed (docs/design.md "Learning"),
// in residual form
//
//     G(x) = x + dt * S ⊙ N((x - m) ⊘ s)
//
// with per-channel m (mean), s (std, > 0) and S (increment scale, > 0: e.g.
// the std of one-step increments divided by dt), N an Mlp (channels ->
// hidden... -> channels), dt the model step in model time units. The model
// also carries mu, one trainable value per channel used by the residual
// constraint (a learned one-step method); G does not depend on mu.
//
// Trainable parameters form ONE contiguous buffer: the network's weights and
// biases (Mlp layout) followed by mu (C values). FlowMapGrads has the same
// layout, so one AdamW and one ClipGlobalNorm cover everything.
//
// Batches are matrices whose columns are samples (C x B), as in Mlp.
// Thread safety and allocation: as Mlp (const calls may run concurrently
// with separate caches; buffers are reused while the batch size holds).
#pragma once

#include <cstdint>
#include <vector>

#include "core/status.h"
#include "learn/mlp.h"

namespace lyapcast {

template <typename T>
struct FlowMapCache {
  typename MlpTypes<T>::Mat xn;   // normalized input (x - m) / s
  typename MlpTypes<T>::Mat out;  // N(xn)
  MlpCache<T> net;
  // Backward scratch (same single-thread rule as MlpCache::dpre).
  mutable typename MlpTypes<T>::Mat dout, dxn;
};

// Gradients of the flat trainable buffer: network part, then mu.
template <typename T>
class FlowMapGrads {
 public:
  using Vec = typename MlpTypes<T>::Vec;
  FlowMapGrads() = default;
  explicit FlowMapGrads(const MlpLayout& layout) : net_(layout) {}
  void SetZero() { net_.SetZero(); }
  Vec& flat() { return net_.flat(); }
  const Vec& flat() const { return net_.flat(); }
  MlpGrads<T>& network() { return net_; }
  const MlpGrads<T>& network() const { return net_; }
  typename MlpTypes<T>::VecMap mu() { return net_.extra(); }

 private:
  MlpGrads<T> net_;
};

template <typename T>
class FlowMap {
 public:
  using Mat = typename MlpTypes<T>::Mat;
  using Vec = typename MlpTypes<T>::Vec;

  // Checks channels >= 1, the network shape (ValidateMlpShape), dt finite
  // and > 0. The model starts with zero weights, m = 0, s = S = 1, mu = 0.
  [[nodiscard]] static Result<FlowMap> Create(int channels, const std::vector<int>& hidden, Activation activation,
                                              double dt);

  FlowMap() = default;  // empty; only assignment is meaningful

  bool empty() const { return net_.empty(); }  // default-constructed
  // Everything below requires !empty().
  int channels() const { return net_.input_size(); }
  double dt() const { return dt_; }
  std::vector<int> hidden() const;  // hidden widths
  Activation activation() const { return net_.activation(); }
  const Vec& mean() const { return mean_; }
  const Vec& stddev() const { return std_; }
  const Vec& increment_scale() const { return scale_; }
  typename MlpTypes<T>::VecMap mu() { return net_.extra(); }
  typename MlpTypes<T>::ConstVecMap mu() const { return net_.extra(); }
  Mlp<T>& network() { return net_; }
  const Mlp<T>& network() const { return net_; }
  // The whole trainable buffer (network, then mu) and its layout.
  Vec& parameters() { return net_.parameters(); }
  const Vec& parameters() const { return net_.parameters(); }
  const MlpLayout& layout() const { return net_.layout(); }

  // Sets m, s, S WITHOUT touching the weights: the represented function
  // changes. For a cold start (then InitRandom) and for loading. Requires
  // sizes == channels(); s and S finite and > 0, m finite (else
  // kInvalidArgument, nothing changed).
  [[nodiscard]] Status SetNormalization(const Vec& m, const Vec& s, const Vec& S);

  // Moves to new statistics m2, s2, S2 while keeping G unchanged (up to
  // rounding) by rewriting the first and last layers; see flow_map.cpp for
  // the derivation. Same requirements as SetNormalization. Optimizer moments
  // refer to the old parametrization; restart them after a refit.
  [[nodiscard]] Status Refit(const Vec& m2, const Vec& s2, const Vec& S2);

  // Network weights as Mlp::InitRandom(seed); mu reset to 0.
  void InitRandom(std::uint64_t seed);

  // Y = G(X), X: C x B. *Y may be the same object as X.
  void Forward(const Mat& X, Mat* Y, FlowMapCache<T>* cache) const;

  // From dY = dL/dG(X) for the batch of `cache`: ADDS network gradients into
  // *grads (mu's slots untouched: G does not use mu; constraint terms add
  // theirs via grads->mu()) and, if dX is not null, OVERWRITES *dX with
  // dL/dX = dY + diag(1/s) J_N^T diag(dt S) dY, the identity skip included,
  // so a composition G^k backpropagates by chaining dX into the previous
  // step's dY. dX MAY be the same object as dY.
  void Backward(const FlowMapCache<T>& cache, const Mat& dY, FlowMapGrads<T>* grads, Mat* dX) const;

  // J = dG/dx at x = I + dt diag(S) J_N((x - m)/s) diag(1/s) (C x C). The
  // overload without scratch allocates its temporaries on every call.
  void Jacobian(const Vec& x, Mat* J) const;
  void Jacobian(const Vec& x, Mat* J, MlpJacobianScratch<T>* scratch) const;

  // Fresh FlowMapGrads with this model's layout (zeroed).
  FlowMapGrads<T> MakeGrads() const { return FlowMapGrads<T>(net_.layout()); }

  // A copy in another scalar type (values rounded to U).
  template <typename U>
  FlowMap<U> Cast() const;

  // Per-sample work (Mlp counts plus the normalization and skip, 4 per channel).
  std::int64_t ForwardFlopsPerSample() const { return net_.ForwardFlopsPerSample() + 4 * channels(); }
  std::int64_t TrainingFlopsPerSample() const { return net_.TrainingFlopsPerSample() + 8 * channels(); }

 private:
  template <typename U>
  friend class FlowMap;
  void UpdateDerived();  // out_scale_ from S and dt

  Mlp<T> net_;
  double dt_ = 1.0;
  Vec mean_, std_, scale_;
  Vec out_scale_;  // dt * S
};

template <typename T>
template <typename U>
FlowMap<U> FlowMap<T>::Cast() const {
  FlowMap<U> out;
  if (empty()) return out;
  out.net_ = net_.template Cast<U>();
  out.dt_ = dt_;
  out.mean_ = mean_.template cast<U>();
  out.std_ = std_.template cast<U>();
  out.scale_ = scale_.template cast<U>();
  out.UpdateDerived();
  return out;
}

extern template class FlowMap<float>;
extern template class FlowMap<double>;

}  // namespace lyapcast
