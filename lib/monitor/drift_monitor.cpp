#include "monitor/drift_monitor.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <utility>

namespace lyapcast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kAlpha = 2.0 / (DriftMonitor::kWindow + 1);  // the EWMA whose span is kWindow

ChangeTestOptions ChangeOptions(const DriftMonitorOptions& m) {
  ChangeTestOptions o;
  o.threshold = m.change_threshold;
  o.drift = m.change_drift;
  o.warmup = DriftMonitor::kWarmupBlocks;
  return o;
}



}  // namespace

DriftMonitor::DriftMonitor(const DriftMonitorOptions& options)
    : channels_(options.channels),
      step_(options.step),
      change_options_(ChangeOptions(options)),
      change_(change_options_) {}

Status DriftMonitor::SetModel(std::shared_ptr<const ForecastModel> model, std::int64_t version,
                              double validation_error, DataTime trained_to, WallTime promoted_wall,
                              Handover handover) {
  if (model != nullptr && model->shape().channels != channels_) {
    return Status::Invalid(fmt::format("model version {} has {} channels, the feed {}", version,
                                       model->shape().channels, channels_));
  }
  model_ = std::move(model);
  scratch_ = model_ != nullptr ? model_->NewScratch() : nullptr;
  version_ = version;
  validation_error_ = validation_error;
  trained_to_ = trained_to;
  promoted_wall_ = promoted_wall;
  const bool carry = handover == Handover::kSuccessor && model_ != nullptr && alarms_ == 0;
  if (carry) {
    ResetScores();
  } else {
    Reset();
  }
  return Status::Ok();
}

void DriftMonitor::Reset() {
  ResetScores();
  change_.Reset();
  block_sum_ = 0;
  block_count_ = 0;
}

void DriftMonitor::ResetScores() {
  scored_ = 0;
  last_error_ = 0;
  ewma_sq_ = 0;
  window_sq_.fill(0);
  drift_flag_ = false;
  flagged_at_.reset();
  alarms_ = 0;
}

bool DriftMonitor::Consecutive(DataTime from, DataTime to) const {
  const Micros gap = to - from;
  return std::chrono::abs(gap - step_) * 100 <= step_;
}

double DriftMonitor::Score(const Sample& s) {
  const auto c = static_cast<Eigen::Index>(channels_);
  x_.resize(c);
  for (Eigen::Index k = 0; k < c; ++k) x_[k] = prev_->values[static_cast<std::size_t>(k)];
  model_->Step(x_, &y_, *scratch_);
  const Eigen::VectorXd& scale = model_->error_scale();
  double sum = 0;
  int present = 0;
  for (int k = 0; k < channels_; ++k) {
    if (s.missing(k)) continue;
    const double z = (y_[k] - s.values[static_cast<std::size_t>(k)]) / scale[k];
    sum += z * z;
    ++present;
  }
  return std::sqrt(sum / present);
}

DriftMonitor::Observation DriftMonitor::Observe(const Sample& s, WallTime arrived_wall) {
  Observation out;
  last_arrival_ = arrived_wall;
  const bool in_order = !newest_ || s.t > *newest_;
  if (!in_order) return out;  // late: data age only; prev_ stays the newest sample
  newest_ = s.t;
  if (s.values.size() != static_cast<std::size_t>(channels_)) return out;  // not this feed's shape

  bool any_present = false;
  for (int k = 0; k < channels_ && !any_present; ++k) any_present = !s.missing(k);
  const bool scorable = model_ != nullptr && !paused_ && s.t > trained_to_ && prev_ && prev_->complete() &&
                        Consecutive(prev_->t, s.t) && any_present;
  // A non-finite e (a value beyond float range) would poison the rolling
  // figures until the next model; such a sample is not scored.
  const double e = scorable ? Score(s) : kNaN;
  if (std::isfinite(e)) {
    out.scored = true;
    out.error = e;
    last_error_ = e;
    const double e2 = e * e;
    ewma_sq_ = scored_ == 0 ? e2 : ewma_sq_ + kAlpha * (e2 - ewma_sq_);  // start at the first value, not 0
    window_sq_[static_cast<std::size_t>(scored_ % kWindow)] = e2;
    ++scored_;
    block_sum_ += std::log(e);
    if (++block_count_ < kBlock) {
      prev_ = s;
      return out;
    }
    const double block_mean = block_sum_ / kBlock;
    block_sum_ = 0;
    block_count_ = 0;
    if (change_.Add(block_mean)) {
      out.alarm_raised = true;
      if (!drift_flag_) flagged_at_ = s.t;
      drift_flag_ = true;
      ++alarms_;
      ++alarms_total_;
      change_.Restart();
    }
  }
  prev_ = s;
  return out;
}

double DriftMonitor::RmseWindow() const {
  const std::int64_t n = std::min<std::int64_t>(scored_, kWindow);
  if (n == 0) return kNaN;
  double sum = 0;  // summed afresh: a running sum would accumulate rounding
  for (std::int64_t i = 0; i < n; ++i) sum += window_sq_[static_cast<std::size_t>(i)];
  return std::sqrt(sum / static_cast<double>(n));
}

double DriftMonitor::e0() const {
  if (model_ == nullptr) return kNaN;
  return scored_ >= kMinScored ? RmseWindow() : validation_error_;
}

DriftSnapshot DriftMonitor::Snapshot(WallTime wall_now) const {
  DriftSnapshot d;
  if (model_ != nullptr) {
    d.model_version = version_;
    if (std::isfinite(validation_error_)) d.validation_error = validation_error_;
    d.model_age_s = Seconds(wall_now - promoted_wall_);
    if (newest_) d.since_training_s = Seconds(*newest_ - trained_to_);
  }
  d.scored = scored_;
  if (scored_ > 0) {
    d.last_error = last_error_;
    d.rmse_ewma = std::sqrt(ewma_sq_);
    d.rmse_window = RmseWindow();
    if (scored_ >= kMinScored && d.validation_error && *d.validation_error > 0) {
      d.drift_ratio = *d.rmse_window / *d.validation_error;
    }
  }
  d.change_statistic = change_.statistic();
  d.warming_up = change_.warming_up();
  d.drift_flag = drift_flag_;
  d.flagged_at = flagged_at_;
  d.alarms = alarms_;
  d.alarms_total = alarms_total_;
  d.paused = paused_;
  d.newest_data_time = newest_;
  d.last_arrival_wall = last_arrival_;
  if (last_arrival_) d.data_age_s = Seconds(wall_now - *last_arrival_);
  return d;
}

}  // namespace lyapcast
