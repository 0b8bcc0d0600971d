// ForecastModel: the seam between a learned model and everything that uses
// one (forecasts, drift scoring, Lyapunov exponents; docs/design.md
// "The model seam"). A model maps the values of its channels one model step
// ahead; callers see the channel roles, the step, a per-channel error scale
// and Step/StepBatch/Jacobian, never the network behind them.
//
// Today every channel is a state channel (inputs = outputs = the feed's
// channels) and the one family is the neural flow map (learn/flow_map.h).
// Later issues add control-input channels (ChannelRole::kInput), memory
// (delay) inputs and ensembles: they extend ModelShape and add arguments to
// Step (the inputs, the memory) rather than adding other entry points, so
// Rollout stays the one free run every caller shares.
//
// Thread safety: a ForecastModel is immutable after construction; its const
// methods may run concurrently on different threads as long as each thread
// passes its own ModelScratch (from NewScratch). Nothing here throws.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <cstdint>
#include <memory>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "learn/flow_map.h"

namespace lyapcast {

// What a channel is to the model. The numeric values are the model file's
// role codes (learn/model_file.h): never renumber one.
enum class ChannelRole : std::uint8_t {
  kState = 0,  // predicted one step ahead, and fed back in a free run
  // later: kInput (given from outside at every step, never predicted)
};

// "state"; "?" for a value outside the enum.
const char* ChannelRoleName(ChannelRole role);

struct ModelShape {
  int channels = 0;                // values in x (and in Step's output)
  std::vector<ChannelRole> roles;  // one per channel, in model order
  double dt = 1.0;                 // one model step in model time units (> 0)

  int states() const;  // channels whose role is kState
};

// All-state roles for `channels` channels (what version-1 model files mean).
std::vector<ChannelRole> AllStateRoles(int channels);

// Per-thread working buffers of one model; opaque to callers. A scratch
// belongs to the model that made it and to one thread at a time.
class ModelScratch {
 public:
  virtual ~ModelScratch() = default;
};

class ForecastModel {
 public:
  virtual ~ForecastModel() = default;

  virtual const ModelShape& shape() const = 0;
  // A short, stable family name, e.g. "neural_flow_map".
  virtual std::string_view family() const = 0;
  // Per-channel scale of normalized errors ((prediction - value) / scale):
  // the drift monitor's and the trainer's one-step error use it. All > 0.
  virtual const Eigen::VectorXd& error_scale() const = 0;
  // The per-channel mean of the data the model was fitted on (its
  // normalization centre): a state on its attractor's range, where a run
  // starts when no measured state is at hand.
  virtual const Eigen::VectorXd& training_mean() const = 0;

  virtual std::unique_ptr<ModelScratch> NewScratch() const = 0;

  // *next = the model's one-step map at x. x has shape().channels values;
  // next may be &x. `scratch` must come from this model's NewScratch.
  // Non-finite values propagate (no check, no error).
  virtual void Step(const Eigen::VectorXd& x, Eigen::VectorXd* next, ModelScratch& scratch) const = 0;
  // The same for a batch: X is channels x B (columns are samples); Y may be &X.
  virtual void StepBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* Y, ModelScratch& scratch) const = 0;
  // *J = d(Step)/dx at x (channels x channels).
  virtual void Jacobian(const Eigen::VectorXd& x, Eigen::MatrixXd* J, ModelScratch& scratch) const = 0;
};

// The neural flow map as a ForecastModel: FlowMap<T>::Forward and Jacobian,
// with values cast to T on the way in and to double on the way out (float
// for serving, double for training and analysis). For T = float a state that
// came out of Step goes back in unchanged (float -> double -> float is
// exact), so a free run through Step equals one kept in float throughout.
template <typename T>
class NeuralFlowMap final : public ForecastModel {
 public:
  // kInvalidArgument when `map` is empty or `roles` does not give every one
  // of its channels the state role (a flow map predicts all its channels).
  [[nodiscard]] static Result<std::shared_ptr<const NeuralFlowMap>> Create(FlowMap<T> map,
                                                                         std::vector<ChannelRole> roles);
  // All-state roles. Requires !map.empty().
  explicit NeuralFlowMap(FlowMap<T> map);

  const ModelShape& shape() const override { return shape_; }
  std::string_view family() const override { return "neural_flow_map"; }
  // The flow map's per-channel stddev() s, as double.
  const Eigen::VectorXd& error_scale() const override { return error_scale_; }
  const Eigen::VectorXd& training_mean() const override { return training_mean_; }
  std::unique_ptr<ModelScratch> NewScratch() const override;
  void Step(const Eigen::VectorXd& x, Eigen::VectorXd* next, ModelScratch& scratch) const override;
  void StepBatch(const Eigen::MatrixXd& X, Eigen::MatrixXd* Y, ModelScratch& scratch) const override;
  void Jacobian(const Eigen::VectorXd& x, Eigen::MatrixXd* J, ModelScratch& scratch) const override;

  const FlowMap<T>& flow_map() const { return map_; }

 private:
  NeuralFlowMap(FlowMap<T> map, std::vector<ChannelRole> roles);

  FlowMap<T> map_;
  ModelShape shape_;
  Eigen::VectorXd error_scale_;
  Eigen::VectorXd training_mean_;
};

extern template class NeuralFlowMap<float>;
extern template class NeuralFlowMap<double>;

// The network behind `model` when it is a NeuralFlowMap<T>, else null (other
// families, or the other scalar type). For the few callers that need the
// network itself (e.g. to compare weights); everything else goes through
// ForecastModel. The pointer lives as long as `model`.
template <typename T>
const FlowMap<T>* NeuralNetworkOf(const ForecastModel& model) {
  const auto* neural = dynamic_cast<const NeuralFlowMap<T>*>(&model);
  return neural != nullptr ? &neural->flow_map() : nullptr;
}

// A free run: the states after 1..steps model steps from `start`, one column
// each (channels x steps). Values are not checked: a run that leaves the
// representable range carries inf/NaN from there on, and callers report such
// values as missing (null in JSON, empty in CSV) rather than stopping, so the
// trajectory always has `steps` columns. first_non_finite is the column of
// the first non-finite value (-1 when every value is finite).
struct FreeRun {
  Eigen::MatrixXd states;
  std::int64_t first_non_finite = -1;
};

// Requires start.size() == model.shape().channels and steps >= 0. `scratch`
// may be null (one is made for the call) or from model.NewScratch().
FreeRun Rollout(const ForecastModel& model, const Eigen::VectorXd& start, std::int64_t steps,
                   ModelScratch* scratch = nullptr);

}  // namespace lyapcast
