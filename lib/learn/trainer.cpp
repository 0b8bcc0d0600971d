#include "learn/trainer.h"

#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <map>
#include <random>

#include "learn/adam.h"
#include "learn/trajectory_loss.h"

namespace lyapcast {
namespace {

using Clock = std::chrono::steady_clock;

double Sigmoid(double x) { return 1.0 / (1.0 + std::exp(-x)); }

double AnnealWeight(const ConstraintOptions& c, int iteration, int iterations) {
  const double progress = static_cast<double>(iteration) / std::max(iterations, 1);
  return c.weight * Sigmoid((progress - c.anneal.mid) / std::max(c.anneal.width, 1e-9));
}

// Trajectories grouped by horizon, drawn in proportion to their number.
class BatchSampler {
 public:
  BatchSampler(const std::vector<Trajectory>& all, std::uint64_t seed) : rng_(seed) {
    std::map<int, std::vector<Trajectory>> by_horizon;
    for (const Trajectory& t : all) by_horizon[t.horizon].push_back(t);
    for (auto& [h, list] : by_horizon) buckets_.push_back(std::move(list));
    total_ = all.size();
  }
  // Fills `out` with `batch` trajectories of one horizon (drawn with replacement).
  void Draw(int batch, std::vector<Trajectory>* out) {
    std::uint64_t pick = rng_() % total_;
    std::size_t b = 0;
    while (pick >= buckets_[b].size()) pick -= buckets_[b++].size();
    const auto& bucket = buckets_[b];
    out->resize(static_cast<std::size_t>(batch));
    for (auto& t : *out) t = bucket[rng_() % bucket.size()];
  }

 private:
  std::mt19937_64 rng_;  // fully specified by the standard: same draws everywhere
  std::vector<std::vector<Trajectory>> buckets_;
  std::size_t total_ = 0;
};

// Restores `best` into the model if it is set.
void KeepBest(FlowMap<float>& model, const Eigen::VectorXf& best) {
  if (best.size() == model.parameters().size()) model.parameters() = best;
}

}  // namespace

const char* FitStopName(FitStop s) {
  switch (s) {
    case FitStop::kIterations: return "iteration budget";
    case FitStop::kTimeBudget: return "time budget";
    case FitStop::kEarlyStopping: return "early stopping";
    case FitStop::kCancelled: return "cancelled";
  }
  return "?";
}

Result<Normalization> ComputeNormalization(const GridSeries& grid, std::size_t end, double dt, int max_gap) {
  const int c = grid.channels;
  end = std::min(end, grid.size());
  const auto reach = static_cast<std::size_t>(std::max(max_gap, 1));
  Eigen::VectorXd sum = Eigen::VectorXd::Zero(c), sum2 = Eigen::VectorXd::Zero(c);
  Eigen::VectorXd isum = Eigen::VectorXd::Zero(c), isum2 = Eigen::VectorXd::Zero(c);
  double n = 0, ni = 0;
  for (std::size_t i = 0; i < end; ++i) {
    if (!grid.complete(i)) continue;
    const auto x = Eigen::Map<const Eigen::VectorXd>(grid.row(i), c);
    sum += x;
    sum2 += x.cwiseAbs2();
    n += 1;
    // The next complete state, k <= max_gap steps on; its increment per step.
    const std::size_t stop = std::min(end, grid.segment_end(i));
    std::size_t j = i + 1;
    while (j < stop && j - i < reach && !grid.complete(j)) ++j;
    if (j < stop && grid.complete(j)) {
      const double k = static_cast<double>(j - i);  // 1 on consecutive states: the division is exact
      const Eigen::VectorXd inc = (Eigen::Map<const Eigen::VectorXd>(grid.row(j), c) - x) / k;
      isum += inc;
      isum2 += inc.cwiseAbs2();
      ni += 1;
    }
  }
  if (n < 2 || ni < 2) {
    return Status::Invalid(fmt::format(
        "need at least 2 complete states each followed by another complete state at most {} model step{} later "
        "to normalize; found {} complete states and {} such pairs",
        reach, reach == 1 ? "" : "s", n, ni));
  }
  Normalization out;
  out.mean = sum / n;
  out.stddev = ((sum2 - sum.cwiseAbs2() / n) / (n - 1)).cwiseMax(0.0).cwiseSqrt();
  out.increment_scale = ((isum2 - isum.cwiseAbs2() / ni) / (ni - 1)).cwiseMax(0.0).cwiseSqrt() / dt;
  for (int k = 0; k < c; ++k) {
    if (out.stddev[k] == 0) {  // constant: left out (see Normalization)
      out.left_out |= std::uint64_t{1} << k;
      out.stddev[k] = Normalization::kLeftOutScale * std::max(std::abs(out.mean[k]), 1.0);
      out.increment_scale[k] = Normalization::kLeftOutIncrement;
    } else if (!(out.stddev[k] > 0) || !(out.increment_scale[k] > 0)) {
      return Status::Invalid(fmt::format(
          "channel {} has no usable spread over the training data (std {:g}, increment scale {:g})", k,
          out.stddev[k], out.increment_scale[k]));
    }
  }
  return out;
}

std::vector<double> OneStepError(const FlowMap<float>& model, const GridSeries& grid,
                                 const std::vector<Trajectory>& trajectories, const Eigen::VectorXf* scale) {
  const Eigen::VectorXf& s = scale != nullptr ? *scale : model.stddev();
  const int c = grid.channels;
  std::vector<double> sum(static_cast<std::size_t>(c), 0.0), count(static_cast<std::size_t>(c), 0.0);
  constexpr std::size_t kChunk = 1024;
  MlpTypes<float>::Mat X, Y;
  FlowMapCache<float> cache;
  struct Scored {
    std::size_t start, target;  // target: the first grid point after start holding a sample
  };
  std::vector<Scored> items;
  std::vector<std::size_t> live, next_live;  // items still being unrolled, in column order
  const auto score = [&](Eigen::Index col, std::size_t target) {
    const double* y = grid.row(target);
    for (int k = 0; k < c; ++k) {
      if ((grid.target_missing(target) >> k) & 1U) continue;
      const double e = (Y(k, col) - y[k]) / s[k];
      sum[static_cast<std::size_t>(k)] += e * e;
      count[static_cast<std::size_t>(k)] += 1;
    }
  };
  for (std::size_t begin = 0; begin < trajectories.size(); begin += kChunk) {
    items.clear();
    for (std::size_t k = begin; k < std::min(begin + kChunk, trajectories.size()); ++k) {
      const auto s = static_cast<std::size_t>(trajectories[k].start);
      const std::size_t last = std::min(s + static_cast<std::size_t>(std::max(trajectories[k].horizon, 0)),
                                        grid.size() == 0 ? 0 : grid.size() - 1);
      for (std::size_t j = s + 1; j <= last; ++j) {
        if (grid.present[j]) {
          items.push_back({s, j});
          break;
        }
      }
    }
    if (items.empty()) continue;
    X.resize(c, static_cast<Eigen::Index>(items.size()));
    live.resize(items.size());
    for (std::size_t b = 0; b < items.size(); ++b) {
      X.col(static_cast<Eigen::Index>(b)) = Eigen::Map<const Eigen::VectorXd>(grid.row(items[b].start), c).cast<float>();
      live[b] = b;
    }
    // Step every live column once; score those whose target is reached and
    // carry the others (the k-step ones) on to the next step.
    for (std::size_t step = 1; !live.empty(); ++step) {
      model.Forward(X, &Y, &cache);
      next_live.clear();
      for (std::size_t b = 0; b < live.size(); ++b) {
        const Scored& item = items[live[b]];
        if (item.target - item.start == step) {
          score(static_cast<Eigen::Index>(b), item.target);
        } else {
          X.col(static_cast<Eigen::Index>(next_live.size())) = Y.col(static_cast<Eigen::Index>(b));
          next_live.push_back(live[b]);
        }
      }
      X.conservativeResize(Eigen::NoChange, static_cast<Eigen::Index>(next_live.size()));
      live.swap(next_live);
    }
  }
  std::vector<double> rmse(static_cast<std::size_t>(c), std::numeric_limits<double>::quiet_NaN());
  for (std::size_t k = 0; k < rmse.size(); ++k) {
    if (count[k] > 0) rmse[k] = std::sqrt(sum[k] / count[k]);
  }
  return rmse;
}

Result<FitResult> Fit(FlowMap<float>& model, const GridSeries& grid, const TrajectorySet& set, const FitOptions& o,
                      const std::function<void(const FitProgress&)>& progress) {
  if (set.train.empty()) return Status::Invalid("no training pairs: the window holds too few complete, close samples");
  if (o.iterations < 1 || o.batch < 1) return Status::Invalid("iterations and batch must be at least 1");
  if (grid.channels != model.channels()) {
    return Status::Invalid(fmt::format("the data has {} channels, the model {}", grid.channels, model.channels()));
  }
  const auto started = Clock::now();
  const int c = grid.channels;
  const ConstraintOptions* velocity = nullptr;
  const ConstraintOptions* residual = nullptr;
  if (o.dynamics != nullptr) {
    for (const ConstraintOptions& k : o.constraints) {
      (k.kind == ConstraintKind::kVelocity ? velocity : residual) = &k;
    }
  }
  DynamicsTable table;
  if (velocity || residual) table = DynamicsTable::Build(*o.dynamics, grid, set.validation_begin);

  BatchSampler sampler(set.train, o.seed);
  AdamWOptions adam_options;
  adam_options.weight_decay = o.weight_decay;
  AdamW<float> adam(model.parameters().size(), adam_options);
  LearningRateSchedule schedule;
  schedule.base = o.learning_rate;
  schedule.kind = LearningRateSchedule::Kind::kCosine;
  schedule.total_iterations = o.iterations;
  schedule.floor_fraction = o.lr_floor_fraction;

  FitResult result;
  result.train_trajectories = static_cast<std::int64_t>(set.train.size());
  result.validation_trajectories = static_cast<std::int64_t>(set.validation.size());
  FlowMapGrads<float> grads = model.MakeGrads();
  TrajectoryLoss<float> objective;
  std::vector<Trajectory> batch;
  Eigen::VectorXf best = model.parameters();  // the starting weights until validation finds better
  double best_validation = std::numeric_limits<double>::infinity();
  int checks_without_improvement = 0;

  for (int it = 0; it < o.iterations; ++it) {
    if (o.cancel && o.cancel->load(std::memory_order_relaxed)) {
      result.stop = FitStop::kCancelled;
      break;
    }
    if (o.time_budget_s > 0 && std::chrono::duration<double>(Clock::now() - started).count() > o.time_budget_s) {
      result.stop = FitStop::kTimeBudget;
      break;
    }
    sampler.Draw(o.batch, &batch);
    LossWeights weights;
    if (velocity) weights.velocity = AnnealWeight(*velocity, it, o.iterations);
    if (residual) weights.residual = AnnealWeight(*residual, it, o.iterations);
    grads.SetZero();
    const LossTerms terms = objective.Evaluate(model, grid, batch, weights, o.dynamics, &table, &grads);
    const double loss = terms.Total(weights);
    const double norm = ClipGlobalNorm(grads.flat(), o.clip);
    if (!std::isfinite(loss) || !std::isfinite(norm)) {
      KeepBest(model, best);
      return Status::Internal(fmt::format(
          "training diverged at iteration {} (loss {}, gradient norm {}); the model keeps its best weights so far. "
          "Lower retrain.learning_rate or retrain.clip, or check the data for outliers",
          it + 1, loss, norm));
    }
    const double lr = schedule.At(it);
    adam.Step(model.parameters(), grads.flat(), lr);

    FitProgress p;
    p.iteration = it + 1;
    p.iterations = o.iterations;
    p.loss = loss;
    p.data = terms.data;
    p.velocity = terms.velocity;
    p.residual = terms.residual;
    p.learning_rate = lr;
    p.grad_norm = norm;
    const bool last = it + 1 == o.iterations;
    if (!set.validation.empty() && (last || (o.validate_every > 0 && (it + 1) % o.validate_every == 0))) {
      const std::vector<double> v = OneStepError(model, grid, set.validation);
      double mean = 0;
      for (double x : v) mean += x / c;
      p.validation = mean;
      if (mean < best_validation) {
        best_validation = mean;
        best = model.parameters();
        result.best_iteration = it + 1;
        checks_without_improvement = 0;
      } else {
        ++checks_without_improvement;
      }
    }
    result.iterations = it + 1;
    result.last = p;
    if (progress) progress(p);
    if (o.patience > 0 && checks_without_improvement >= o.patience) {
      result.stop = FitStop::kEarlyStopping;
      break;
    }
  }
  if (!set.validation.empty()) {
    if (result.best_iteration > 0 && result.best_iteration != result.iterations) KeepBest(model, best);
    result.validation_rmse = OneStepError(model, grid, set.validation);
    result.validation_error = 0;
    for (double x : result.validation_rmse) result.validation_error += x / c;
  } else {
    result.validation_rmse.assign(static_cast<std::size_t>(c), std::numeric_limits<double>::quiet_NaN());
  }
  result.seconds = std::chrono::duration<double>(Clock::now() - started).count();
  return result;
}

}  // namespace lyapcast
