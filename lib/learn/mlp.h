// Mlp<T>: the multilayer perceptron inside the flow map (docs/design.md
// "Learning"), with analytic backpropagation over whole batches.
//
// Layers: in -> hidden[0] -> ... -> hidden[H-1] -> out. Hidden layers apply
// tanh or SiLU (x * sigmoid(x)) coefficient-wise; the output layer is linear.
// A batch is a column-major matrix whose COLUMNS are samples (width x B).
// Every kernel works on the whole batch (W * X, bias broadcast, coefficient-
// wise activation); there are no per-sample loops.
//
// Parameters live in ONE contiguous buffer so the optimizer and the model
// file see a flat vector. Layout, for layer l = 0..L-1 (L = H + 1) with
// n_in = sizes[l], n_out = sizes[l+1]:
//   W_l: n_out x n_in, column-major (n_out * n_in values), then
//   b_l: n_out values,
// layers in order, followed by `extra` trailing slots that the Mlp itself
// never reads or writes (an owner such as FlowMap keeps its own trainable
// values there, e.g. mu, so one optimizer covers everything). MlpGrads has
// the same layout.
//
// Thread safety: const member functions may run concurrently on one Mlp
// provided each thread uses its own MlpCache / MlpGrads / output matrices.
// Nothing here starts threads (the build does not use -fopenmp, so Eigen's
// products run on the calling thread).
//
// Allocation: Forward/Backward allocate only when a cache, output or
// gradient matrix changes shape (first call, or a new batch size); repeated
// calls with the same batch size reuse the buffers. Eigen's matrix products
// take their blocking buffers from the stack below 128 KiB and from the heap
// above: a 3-64-64-3 step at batch 256 (float or double) makes no heap
// allocation at all; 256-wide layers at batch 1024 make a few per step.
#pragma once

#include "core/eigen.h"
#include <cstdint>
#include <vector>

#include "core/status.h"
#include "learn/activation.h"

namespace lyapcast {

// Size bounds checked by ValidateMlpShape (and so by every loader): they keep
// a corrupted width or depth from turning into an absurd allocation.
inline constexpr int kMaxMlpWidth = 1 << 16;
inline constexpr int kMaxMlpLayers = 64;                        // affine layers
inline constexpr std::int64_t kMaxMlpParameters = std::int64_t{1} << 26;  // 64 Mi values

// Checks `sizes` = {in, hidden..., out}: at least 2 entries, each in
// [1, kMaxMlpWidth], at most kMaxMlpLayers + 1 entries, total weights and
// biases <= kMaxMlpParameters. kInvalidArgument naming the offending entry.
[[nodiscard]] Status ValidateMlpShape(const std::vector<int>& sizes);

// Number of weights and biases for `sizes` (requires a valid shape).
std::int64_t MlpParameterCount(const std::vector<int>& sizes);

// Where each layer's W and b sit in the flat buffer.
struct MlpLayout {
  std::vector<int> sizes;                   // in, hidden..., out
  std::vector<Eigen::Index> weight_offset;  // per layer: start of W_l (b_l follows W_l)
  Eigen::Index network_size = 0;            // weights + biases
  Eigen::Index extra = 0;                   // trailing owner slots
  Eigen::Index total() const { return network_size + extra; }
  int layers() const { return static_cast<int>(weight_offset.size()); }
  int in(int l) const { return sizes[static_cast<size_t>(l)]; }
  int out(int l) const { return sizes[static_cast<size_t>(l) + 1]; }
  Eigen::Index bias_offset(int l) const {
    return weight_offset[static_cast<size_t>(l)] + Eigen::Index{out(l)} * in(l);
  }
  static MlpLayout Make(const std::vector<int>& sizes, Eigen::Index extra);
};

template <typename T>
struct MlpTypes {
  using Mat = Eigen::Matrix<T, Eigen::Dynamic, Eigen::Dynamic>;  // column-major
  using Vec = Eigen::Matrix<T, Eigen::Dynamic, 1>;
  using MatMap = Eigen::Map<Mat>;
  using ConstMatMap = Eigen::Map<const Mat>;
  using VecMap = Eigen::Map<Vec>;
  using ConstVecMap = Eigen::Map<const Vec>;
};

// What Forward keeps for Backward, plus Backward's scratch. One cache per
// in-flight forward pass: a G^k composition keeps k caches. Owned by the
// caller; reused across calls without reallocating while the batch size is
// unchanged. Backward writes only the `mutable` scratch members, so two
// threads must not run Backward on the same cache at once.
template <typename T>
struct MlpCache {
  using Mat = typename MlpTypes<T>::Mat;
  // act[0] = copy of the input X; act[l] (l >= 1) = output of hidden layer l-1.
  std::vector<Mat> act;
  // SiLU only, per hidden layer: pre-activation z and sigmoid(z).
  std::vector<Mat> pre;
  std::vector<Mat> sig;
  // Backward scratch: gradient w.r.t. each hidden layer's pre-activation.
  mutable std::vector<Mat> dpre;
  Eigen::Index batch() const { return act.empty() ? 0 : act[0].cols(); }
};

// Parameter gradients with the Mlp's flat layout (including its extra slots).
template <typename T>
class MlpGrads {
 public:
  using Vec = typename MlpTypes<T>::Vec;
  MlpGrads() = default;
  explicit MlpGrads(const MlpLayout& layout) : layout_(layout), flat_(Vec::Zero(layout.total())) {}
  void SetZero() { flat_.setZero(); }
  Vec& flat() { return flat_; }
  const Vec& flat() const { return flat_; }
  const MlpLayout& layout() const { return layout_; }
  typename MlpTypes<T>::MatMap W(int l) {
    return {flat_.data() + layout_.weight_offset[static_cast<size_t>(l)], layout_.out(l), layout_.in(l)};
  }
  typename MlpTypes<T>::VecMap b(int l) { return {flat_.data() + layout_.bias_offset(l), layout_.out(l)}; }
  typename MlpTypes<T>::VecMap extra() { return {flat_.data() + layout_.network_size, layout_.extra}; }

 private:
  MlpLayout layout_;
  Vec flat_;
};

// Reusable buffers for Jacobian() (a Lyapunov estimate calls it per step).
template <typename T>
struct MlpJacobianScratch {
  typename MlpTypes<T>::Mat a, b;
  typename MlpTypes<T>::Vec h, z;
  typename MlpTypes<T>::Vec input;  // for owners (FlowMap's normalized x); Mlp never touches it
};

template <typename T>
class Mlp {
 public:
  using Mat = typename MlpTypes<T>::Mat;
  using Vec = typename MlpTypes<T>::Vec;

  Mlp() = default;  // empty: no layers; only assignment is meaningful
  // Requires ValidateMlpShape(sizes).ok() and extra >= 0. Parameters start
  // at zero; call InitRandom or write parameters().
  Mlp(const std::vector<int>& sizes, Activation activation, Eigen::Index extra = 0);

  bool empty() const { return layout_.sizes.empty(); }  // default-constructed
  // The shape accessors below require !empty().
  const MlpLayout& layout() const { return layout_; }
  const std::vector<int>& sizes() const { return layout_.sizes; }
  int layers() const { return layout_.layers(); }
  int input_size() const { return layout_.sizes.front(); }
  int output_size() const { return layout_.sizes.back(); }
  Activation activation() const { return activation_; }

  // The whole flat buffer (weights, biases, extra slots); see the layout above.
  Vec& parameters() { return params_; }
  const Vec& parameters() const { return params_; }
  typename MlpTypes<T>::MatMap W(int l) {
    return {params_.data() + layout_.weight_offset[static_cast<size_t>(l)], layout_.out(l), layout_.in(l)};
  }
  typename MlpTypes<T>::ConstMatMap W(int l) const {
    return {params_.data() + layout_.weight_offset[static_cast<size_t>(l)], layout_.out(l), layout_.in(l)};
  }
  typename MlpTypes<T>::VecMap b(int l) { return {params_.data() + layout_.bias_offset(l), layout_.out(l)}; }
  typename MlpTypes<T>::ConstVecMap b(int l) const { return {params_.data() + layout_.bias_offset(l), layout_.out(l)}; }
  typename MlpTypes<T>::VecMap extra() { return {params_.data() + layout_.network_size, layout_.extra}; }
  typename MlpTypes<T>::ConstVecMap extra() const { return {params_.data() + layout_.network_size, layout_.extra}; }

  // Glorot/Xavier-uniform weights (U(-a, a), a = sqrt(6 / (n_in + n_out)),
  // Glorot & Bengio, AISTATS 2010), zero biases; extra slots untouched.
  // Draws from std::mt19937_64(seed) in layout order, mapping each 64-bit
  // output x to u = (x >> 11) * 2^-53 in [0, 1) and w = a * (2u - 1), in
  // double then rounded to T: the same seed gives the same weights on every
  // platform, and Mlp<float> gets the float rounding of Mlp<double>'s weights.
  void InitRandom(std::uint64_t seed);

  // Y = N(X) for a batch X (input_size x B, B >= 1). Fills `cache` for
  // Backward. *Y may be the same object as X.
  void Forward(const Mat& X, Mat* Y, MlpCache<T>* cache) const;

  // Given dY = dL/dY for the batch of `cache` (output_size x B), ADDS the
  // parameter gradients into *grads (so several Backward calls -- the steps
  // of a composition, several loss terms -- accumulate; call SetZero() first
  // for a fresh gradient; grads must have this Mlp's layout; the extra slots
  // are left alone) and, if dX is not null, OVERWRITES *dX with dL/dX
  // (input_size x B). dX must not be the same object as dY.
  void Backward(const MlpCache<T>& cache, const Mat& dY, MlpGrads<T>* grads, Mat* dX) const;

  // J = dN/dx at one input x (output_size x input_size), analytic. The
  // overload without scratch allocates its temporaries on every call.
  void Jacobian(const Vec& x, Mat* J) const;
  void Jacobian(const Vec& x, Mat* J, MlpJacobianScratch<T>* scratch) const;

  // A copy in another scalar type (values rounded to U).
  template <typename U>
  Mlp<U> Cast() const {
    if (empty()) return {};
    Mlp<U> out(layout_.sizes, activation_, layout_.extra);
    out.parameters() = params_.template cast<U>();
    return out;
  }

  // Work per sample, for benchmarks: matrix products count 2 flops per
  // multiply-add, bias adds and activation derivatives 1 flop per element,
  // transcendental functions are not counted. Forward: sum 2*n_in*n_out +
  // n_out. Training step = forward + backward (dW, db, dA of every layer
  // but the first, activation derivative).
  std::int64_t ForwardFlopsPerSample() const;
  std::int64_t TrainingFlopsPerSample() const;

 private:
  MlpLayout layout_;
  Activation activation_ = Activation::kTanh;
  Vec params_;
};

extern template class Mlp<float>;
extern template class Mlp<double>;

}  // namespace lyapcast
