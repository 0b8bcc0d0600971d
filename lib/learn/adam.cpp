#include "learn/adam.h"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <numbers>

namespace lyapcast {

template <typename T>
AdamW<T>::AdamW(Eigen::Index size, AdamWOptions options)
    : options_(options), m_(Vec::Zero(size)), v_(Vec::Zero(size)) {}

template <typename T>
void AdamW<T>::Reset() {
  m_.setZero();
  v_.setZero();
  t_ = 0;
}

template <typename T>
void AdamW<T>::Step(Eigen::Ref<Vec> params, const Eigen::Ref<const Vec>& grads, double learning_rate) {
  assert(params.size() == m_.size() && grads.size() == m_.size());
  ++t_;
  const double b1 = options_.beta1;
  const double b2 = options_.beta2;
  const double bias1 = 1.0 - std::pow(b1, static_cast<double>(t_));
  const double bias2 = 1.0 - std::pow(b2, static_cast<double>(t_));
  const T step_size = static_cast<T>(learning_rate / bias1);
  const T bias2_sqrt = static_cast<T>(std::sqrt(bias2));
  const T eps = static_cast<T>(options_.eps);
  if (options_.weight_decay != 0.0) params *= static_cast<T>(1.0 - learning_rate * options_.weight_decay);
  m_.array() = m_.array() * static_cast<T>(b1) + grads.array() * static_cast<T>(1.0 - b1);
  v_.array() = v_.array() * static_cast<T>(b2) + grads.array().square() * static_cast<T>(1.0 - b2);
  params.array() -= step_size * m_.array() / (v_.array().sqrt() / bias2_sqrt + eps);
}

template class AdamW<float>;
template class AdamW<double>;

namespace {

template <typename V>
double ClipImpl(V& grads, double max_norm) {
  const double norm = std::sqrt(grads.template cast<double>().squaredNorm());
  if (!std::isfinite(norm)) return norm;
  const double coef = max_norm / (norm + 1e-6);
  if (coef < 1.0) grads *= static_cast<typename V::Scalar>(coef);
  return norm;
}

}  // namespace

double ClipGlobalNorm(Eigen::Ref<Eigen::VectorXf> grads, double max_norm) { return ClipImpl(grads, max_norm); }
double ClipGlobalNorm(Eigen::Ref<Eigen::VectorXd> grads, double max_norm) { return ClipImpl(grads, max_norm); }

double LearningRateSchedule::At(int iteration) const {
  iteration = std::max(iteration, 0);
  if (iteration < warmup_iterations) {
    return base * static_cast<double>(iteration + 1) / static_cast<double>(warmup_iterations);
  }
  if (kind == Kind::kConstant) return base;
  const int span = total_iterations - warmup_iterations;
  const double p =
      span <= 0 ? 1.0 : std::clamp(static_cast<double>(iteration - warmup_iterations) / span, 0.0, 1.0);
  return base * (floor_fraction + (1.0 - floor_fraction) * 0.5 * (1.0 + std::cos(std::numbers::pi * p)));
}

}  // namespace lyapcast
