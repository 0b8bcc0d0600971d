// AdamW over a flat parameter buffer, global-norm gradient clipping and the
// learning-rate schedule of the trainer.
//
// AdamW follows torch.optim.AdamW (PyTorch 1.13, single-tensor path, no
// amsgrad) operation for operation: decoupled weight decay (Loshchilov &
// Hutter, "Decoupled Weight Decay Regularization", ICLR 2019) applied first,
// then Adam with bias-corrected moments (Kingma & Ba, ICLR 2015):
//   t += 1
//   p *= 1 - lr * wd
//   m = b1 m + (1 - b1) g
//   v = b2 v + (1 - b2) g^2
//   p -= (lr / (1 - b1^t)) * m / (sqrt(v) / sqrt(1 - b2^t) + eps)
// which is p -= lr * mhat / (sqrt(vhat) + eps) with mhat = m / (1 - b1^t),
// vhat = v / (1 - b2^t). Scalar factors are formed in double and rounded to
// T; the per-element arithmetic runs in T.
//
// Thread safety: an AdamW instance belongs to one training job (one thread).
// No allocation in Step.
#pragma once

#include "core/eigen.h"

namespace lyapcast {

// Defaults are torch.optim.AdamW's (lr is passed per step). Note the retrain
// config's weight_decay default is 0; the trainer passes its own value.
struct AdamWOptions {
  double beta1 = 0.9;
  double beta2 = 0.999;
  double eps = 1e-8;
  double weight_decay = 0.01;
};

template <typename T>
class AdamW {
 public:
  using Vec = Eigen::Matrix<T, Eigen::Dynamic, 1>;

  AdamW() = default;  // size 0
  // Moments for `size` parameters, zero; step count 0.
  explicit AdamW(Eigen::Index size, AdamWOptions options = {});

  // One update of `params` (size() values) from `grads` (same size) at
  // learning rate `learning_rate`. Every element takes part, including
  // those whose gradient is zero (they still decay).
  void Step(Eigen::Ref<Vec> params, const Eigen::Ref<const Vec>& grads, double learning_rate);

  // Forget the moments (e.g. after FlowMap::Refit changed the parametrization).
  void Reset();

  Eigen::Index size() const { return m_.size(); }
  long step_count() const { return t_; }
  const AdamWOptions& options() const { return options_; }
  const Vec& first_moment() const { return m_; }
  const Vec& second_moment() const { return v_; }

 private:
  AdamWOptions options_;
  Vec m_, v_;
  long t_ = 0;
};

extern template class AdamW<float>;
extern template class AdamW<double>;

// torch.nn.utils.clip_grad_norm_ semantics (2-norm over the whole buffer):
// norm = ||g||_2 (accumulated in double); if max_norm / (norm + 1e-6) < 1,
// g *= that factor. Returns the norm BEFORE clipping. A non-finite norm
// leaves g unchanged and is returned as is, so the caller can skip the step.
double ClipGlobalNorm(Eigen::Ref<Eigen::VectorXf> grads, double max_norm);
double ClipGlobalNorm(Eigen::Ref<Eigen::VectorXd> grads, double max_norm);

// Learning rate per iteration (0-based):
//  - warm-up: for iteration < warmup_iterations, base * (iteration + 1) /
//    warmup_iterations (linear, never 0);
//  - then kConstant: base;
//  - or kCosine: with p = (iteration - warmup) / (total - warmup) clamped to
//    [0, 1], base * (f + (1 - f) * (1 + cos(pi p)) / 2), f = floor_fraction:
//    base right after warm-up, base * f from iteration total_iterations on.
//    total_iterations <= warmup_iterations gives base * f after warm-up.
// Defaults: base 1e-3 (the retrain config's learning_rate default), no
// warm-up, constant, floor 0.1.
struct LearningRateSchedule {
  enum class Kind { kConstant, kCosine };
  double base = 1e-3;
  int warmup_iterations = 0;
  Kind kind = Kind::kConstant;
  int total_iterations = 0;     // kCosine only
  double floor_fraction = 0.1;  // kCosine only
  double At(int iteration) const;
};

}  // namespace lyapcast
