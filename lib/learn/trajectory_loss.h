// The training loss of a batch of trajectories and its exact gradient:
// the data term over every unrolled step and the physics constraint terms
// once per trajectory (velocity at its first present target, k steps on;
// residual on its first step; formulas in learn/trainer.h). Templated so the trainer runs
// it in float and the gradient checks in double.
#pragma once

#include <vector>

#include "learn/flow_map.h"
#include "learn/pairs.h"
#include "physics/dynamics.h"

namespace lyapcast {

// f at every complete grid state and the per-channel spread fs_c of f over
// the training span [0, train_end): what the constraint terms need from data.
struct DynamicsTable {
  Eigen::MatrixXd f;       // C x n; NaN columns where the state is incomplete
  Eigen::VectorXd fscale;  // C; 1 where f_c does not vary
  static DynamicsTable Build(const Dynamics& dynamics, const GridSeries& grid, std::size_t train_end);
};

struct LossWeights {
  double velocity = 0;  // current (annealed) weights; 0 switches a term off
  double residual = 0;
};

struct LossTerms {
  double data = 0;
  double velocity = 0;  // unweighted
  double residual = 0;  // unweighted
  double Total(const LossWeights& w) const { return data + w.velocity * velocity + w.residual * residual; }
};

template <typename T>
class TrajectoryLoss {
 public:
  // Unrolls `model` from each trajectory's start for its horizon and ADDS the
  // gradient of the total loss (data + weighted terms) w.r.t. the trainable
  // buffer into *grads. `dynamics` and `table` may be null when both weights
  // are 0. Requires trajectories inside the grid with complete starts.
  // Reuses its buffers between calls; one instance per thread.
  LossTerms Evaluate(const FlowMap<T>& model, const GridSeries& grid, const std::vector<Trajectory>& batch,
                     const LossWeights& weights, const Dynamics* dynamics, const DynamicsTable* table,
                     FlowMapGrads<T>* grads);

 private:
  using Mat = typename MlpTypes<T>::Mat;
  void AddConstraints(const FlowMap<T>& model, const GridSeries& grid, const std::vector<Trajectory>& batch,
                      const LossWeights& weights, const Dynamics& dynamics, const DynamicsTable& table, int k,
                      const Mat& G, Mat* dG, typename MlpTypes<T>::VecMap dmu, LossTerms* terms);
  std::vector<Mat> x_;  // x_[k] = G^k(x0)
  std::vector<int> first_target_;  // per batch column: step of the first present target (0: none)
  std::vector<char> velocity_at_;  // per step: some column has a complete first target there
  std::vector<FlowMapCache<T>> caches_;
  Mat dy_, dx_;
};

extern template class TrajectoryLoss<float>;
extern template class TrajectoryLoss<double>;

}  // namespace lyapcast
