#include "learn/forecast_model.h"

#include <fmt/format.h>

#include <algorithm>
#include <cassert>
#include <utility>

namespace lyapcast {

const char* ChannelRoleName(ChannelRole role) {
  switch (role) {
    case ChannelRole::kState: return "state";
  }
  return "?";
}

int ModelShape::states() const {
  return static_cast<int>(std::count(roles.begin(), roles.end(), ChannelRole::kState));
}

std::vector<ChannelRole> AllStateRoles(int channels) {
  return std::vector<ChannelRole>(static_cast<std::size_t>(std::max(channels, 0)), ChannelRole::kState);
}

namespace {

// NeuralFlowMap's buffers: the one-column (or batch) input and output in T,
// the forward cache and the Jacobian's temporaries, all reused call to call.
template <typename T>
struct NeuralScratch final : ModelScratch {
  typename FlowMap<T>::Mat in, out, jac;
  typename FlowMap<T>::Vec x;
  FlowMapCache<T> cache;
  MlpJacobianScratch<T> jscratch;
};

template <typename T>
NeuralScratch<T>& Own(ModelScratch& scratch) {
  // A scratch from another model is a caller bug; the cast is checked in
  // debug builds only because Step is on the serving path.
  assert(dynamic_cast<NeuralScratch<T>*>(&scratch) != nullptr);
  return static_cast<NeuralScratch<T>&>(scratch);
}

}  // namespace

template <typename T>
Result<std::shared_ptr<const NeuralFlowMap<T>>> NeuralFlowMap<T>::Create(FlowMap<T> map,
                                                                        std::vector<ChannelRole> roles) {
  if (map.empty()) return Status::Invalid("a neural flow map needs a network (the flow map is empty)");
  if (roles.size() != static_cast<std::size_t>(map.channels())) {
    return Status::Invalid(
        fmt::format("{} channel roles for a flow map of {} channels", roles.size(), map.channels()));
  }
  for (std::size_t c = 0; c < roles.size(); ++c) {
    if (roles[c] != ChannelRole::kState) {
      return Status::Invalid(fmt::format("channel {} has role '{}'; a neural flow map predicts every channel, so "
                                         "every role must be 'state'",
                                         c, ChannelRoleName(roles[c])));
    }
  }
  return std::shared_ptr<const NeuralFlowMap>(new NeuralFlowMap(std::move(map), std::move(roles)));
}

template <typename T>
NeuralFlowMap<T>::NeuralFlowMap(FlowMap<T> map) : NeuralFlowMap(std::move(map), {}) {}

template <typename T>
NeuralFlowMap<T>::NeuralFlowMap(FlowMap<T> map, std::vector<ChannelRole> roles) : map_(std::move(map)) {
  assert(!map_.empty());
  shape_.channels = map_.channels();
  shape_.roles = roles.empty() ? AllStateRoles(shape_.channels) : std::move(roles);
  shape_.dt = map_.dt();
  error_scale_ = map_.stddev().template cast<double>();
  training_mean_ = map_.mean().template cast<double>();
}

template <typename T>
std::unique_ptr<ModelScratch> NeuralFlowMap<T>::NewScratch() const {
  return std::make_unique<NeuralScratch<T>>();
}

template <typename T>
void NeuralFlowMap<T>::Step(const Eigen::VectorXd& x, Eigen::VectorXd* next, ModelScratch& scratch) const {
  NeuralScratch<T>& s = Own<T>(scratch);
  s.in = x.template cast<T>();  // one-column batch
  map_.Forward(s.in, &s.out, &s.cache);
  *next = s.out.col(0).template cast<double>();
}

template <typename T>
void NeuralFlowMap<T>::StepBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* Y, ModelScratch& scratch) const {
  NeuralScratch<T>& s = Own<T>(scratch);
  s.in = X.template cast<T>();
  map_.Forward(s.in, &s.out, &s.cache);
  *Y = s.out.template cast<double>();
}

template <typename T>
void NeuralFlowMap<T>::Jacobian(const Eigen::VectorXd& x, Eigen::MatrixXd* J, ModelScratch& scratch) const {
  NeuralScratch<T>& s = Own<T>(scratch);
  s.x = x.template cast<T>();
  map_.Jacobian(s.x, &s.jac, &s.jscratch);
  *J = s.jac.template cast<double>();
}

template class NeuralFlowMap<float>;
template class NeuralFlowMap<double>;

FreeRun Rollout(const ForecastModel& model, const Eigen::VectorXd& start, std::int64_t steps,
                   ModelScratch* scratch) {
  assert(start.size() == model.shape().channels && steps >= 0);
  std::unique_ptr<ModelScratch> own;
  if (scratch == nullptr) {
    own = model.NewScratch();
    scratch = own.get();
  }
  FreeRun out;
  out.states.resize(start.size(), static_cast<Eigen::Index>(steps));
  Eigen::VectorXd x = start, next;
  for (std::int64_t k = 0; k < steps; ++k) {
    model.Step(x, &next, *scratch);
    x.swap(next);
    const auto col = static_cast<Eigen::Index>(k);
    out.states.col(col) = x;
    if (out.first_non_finite < 0 && !x.allFinite()) out.first_non_finite = k;
  }
  return out;
}

}  // namespace lyapcast
