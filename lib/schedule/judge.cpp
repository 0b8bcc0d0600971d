#include "schedule/judge.h"

#include <fmt/format.h>

#include <cmath>

#include "learn/model_error.h"

namespace lyapcast {
namespace {

double MeanOverChannels(const std::vector<double>& v) {
  if (v.empty()) return std::numeric_limits<double>::quiet_NaN();
  double m = 0;
  for (double x : v) m += x / static_cast<double>(v.size());
  return m;
}

}  // namespace

Judgement JudgeCandidate(const Candidate& candidate, const ActiveForJudging& active, const RetrainData& data,
                         double promote_tolerance) {
  Judgement j;
  if (!candidate.fit_status.ok()) {
    j.reason = "fit failed: " + candidate.fit_status.message();
    return j;
  }
  if (candidate.model == nullptr) {
    j.reason = "no candidate model";
    return j;
  }
  if (!data.judge.empty()) {
    j.candidate_per_channel = ModelOneStepError(*candidate.model, data.grid, data.judge);
    j.candidate_error = MeanOverChannels(j.candidate_per_channel);
    if (active.model != nullptr) {
      // A channel the active model left out (constant in its data: its
      // scale is huge, its error ~0) and the candidate learned is judged on
      // the candidate's scale, or holding it constant would always win.
      Eigen::VectorXd scale = active.model->error_scale();
      const Eigen::VectorXd& fresh = candidate.model->error_scale();
      for (Eigen::Index k = 0; k < scale.size() && k < fresh.size(); ++k) {
        if (scale[k] > 1e3 * fresh[k]) scale[k] = fresh[k];
      }
      j.active_error = MeanOverChannels(ModelOneStepError(*active.model, data.grid, data.judge, &scale));
    }
  }
  if (!std::isfinite(j.candidate_error)) {
    j.reason = "no held-out data to judge the candidate";
    return j;
  }
  if (active.model == nullptr) {
    j.promote = true;
    j.reason = fmt::format("first model, validation error {:.4g}", j.candidate_error);
  } else if (!std::isfinite(j.active_error) || j.candidate_error <= j.active_error * (1.0 + promote_tolerance)) {
    j.promote = true;
    j.reason = fmt::format("validation error {:.4g} vs active version {} {:.4g} on the same pairs", j.candidate_error,
                           active.version, j.active_error);
  } else {
    j.reason = fmt::format("validation error {:.4g} worse than active version {} {:.4g} x (1 + {:g})",
                           j.candidate_error, active.version, j.active_error, promote_tolerance);
  }
  return j;
}

}  // namespace lyapcast
